"""Coverage before labels leave: align, export and check say, per observed learner, how
many log events their observed windows hold, and export refuses roster log ids the logs
never use (sync/coverage.py), on small studies of our own."""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from export.writer import manifest_path
from tests.conftest import assert_user_error, call_cli
from tests.export.small_studies import LEARNERS, LOG_IDS, ROUNDS, solo_laptops_study, write_log


def test_roster_ids_the_logs_never_use_stop_the_export(tmp_path: Path) -> None:
    wrong = [f"trainee-{number}" for number in range(1, 7)]
    study = solo_laptops_study(tmp_path, roster_ids=wrong)
    out = tmp_path / "w.parquet"
    assert_user_error(call_cli("export", study, "--out", out), "roster.csv", "column log_id",
                      "6 observed learner(s)", "'trainee-1', 'trainee-2', 'trainee-3' and 3 more",
                      "the logs have e.g. 'n-0001', 'n-0002', 'n-0003'")
    assert not out.exists()


def test_one_unmatched_learner_is_enough_to_stop_the_export(tmp_path: Path) -> None:
    ids = list(LOG_IDS)
    ids[2] = "n-0030"
    study = solo_laptops_study(tmp_path, roster_ids=ids)
    result = call_cli("export", study, "--out", tmp_path / "w.parquet")
    assert_user_error(result, "1 observed learner(s)", "'n-0030'")
    assert "hint" not in result.stderr


@pytest.mark.parametrize(("roster_id", "log_id", "how"), [
    ("N-0001", "n-0001", "case or spaces"),
    ("n- 0001", "n-0001", "case or spaces"),
    ("n-0001", "north/n-0001", "a prefix"),
])
def test_ids_differing_by_case_spaces_or_a_prefix_get_a_hint(tmp_path: Path, roster_id: str, log_id: str,
                                                             how: str) -> None:
    study = solo_laptops_study(tmp_path, roster_ids=[roster_id] + LOG_IDS[1:], log_ids=[log_id] + LOG_IDS[1:])
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.parquet"),
                      f"hint: the logs have '{log_id}' for '{roster_id}' (they differ only by {how})")


def test_events_outside_every_window_are_warned_recorded_and_refused_by_check(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    write_log(study, LOG_IDS, shift_s=3 * 3600)  # e.g. a log written in local time read as UTC
    out = tmp_path / "w.parquet"
    result = call_cli("export", study, "--out", out, "--json")
    assert result.returncode == 0, result.stderr
    summary = json.loads(result.stdout)
    for learner, log_id in zip(LEARNERS, LOG_IDS):
        assert any(f"learner {learner} (log_id {log_id!r})" in warning and "none in any" in warning
                   for warning in summary["warnings"]), learner
    manifest = json.loads(manifest_path(out).read_text())
    windows = len(LEARNERS) * ROUNDS * 2  # each coder's observed windows
    assert manifest["coverage"] == {
        "learners_observed": 6, "learners_with_events_in_windows": 0, "learners_without_events_in_windows": 6,
        "learners_without_events_in_logs": 0, "windows": windows, "windows_with_zero_events": windows}
    assert "L01" not in manifest_path(out).read_text()  # counts only: no learner leaves the study
    assert_user_error(call_cli("check", out), "w.parquet", "features", "zero log events")


def test_export_align_and_check_report_coverage_per_learner(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    log = study / "logs" / "centre_north.csv"  # the log as a spreadsheet saves it: BOM and CRLF
    log.write_bytes(b"\xef\xbb\xbf" + log.read_bytes().replace(b"\n", b"\r\n"))
    aligned = call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=28", "--json")
    assert aligned.returncode == 0, aligned.stderr
    coverage = json.loads(aligned.stdout)["coverage"]
    # one event every 2 s: each 20 s window holds 10, each learner has 2 rounds x 2 coders = 4 windows
    per_learner = pd.DataFrame(coverage["learners"]).set_index("learner")
    assert per_learner["windows"].tolist() == [4] * 6 and per_learner["events_in_windows"].tolist() == [40] * 6
    assert coverage["windows_with_zero_events"] == 0
    out = tmp_path / "w.parquet"
    exported = call_cli("export", study, "--out", out)
    assert exported.returncode == 0, exported.stderr
    assert "coverage: 6 of 6 observed learners have log events in their windows" in exported.stdout
    assert "L04 (log_id n-0004): 40 events in 4 windows" in exported.stdout
    checked = call_cli("check", out, "--folds", "2", "--dimension", "activity")
    assert checked.returncode == 0, checked.stderr
    assert "coverage: 6 of 6 observed learners" in checked.stdout
