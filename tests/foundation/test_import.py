"""`fieldmark import`: CSV and another device's store; idempotent; bad rows stop the import."""
from __future__ import annotations

from datetime import datetime, timedelta, timezone
from pathlib import Path

import pandas as pd
import pytest

from observer_app.study.store import Store
from observer_app.study.folder import load_study
from tests.conftest import assert_user_error, call_cli, run_cli

GOOD = """coder,learner,time,device,note,activity,affect
ana,L01,2026-03-02T09:15:00+01:00,,,on_task,focused
ana,L02,2026-03-02T09:15:20+01:00,,looked away,off_task,
ben,L01,2026-03-02T08:15:02Z,tablet-2,,on_task,confused
"""


@pytest.fixture
def study(tmp_path: Path) -> Path:
    folder = tmp_path / "study"
    assert call_cli("init", folder).returncode == 0
    return folder


def write(tmp_path: Path, text: str, name: str = "codes.csv") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def test_csv_import_adds_rows_once(study: Path, tmp_path: Path) -> None:
    csv = write(tmp_path, GOOD)
    result = run_cli("import", study, csv)  # the real entry point, in a subprocess
    assert result.returncode == 0, result.stderr
    assert "added 3 observations" in result.stdout
    again = call_cli("import", study, csv)
    assert again.returncode == 0 and "nothing new" in again.stdout
    with Store(study / "observations.sqlite") as store:
        view = store.observations(["activity", "affect"])
    assert len(view) == 3
    ben = view[view["coder"] == "ben"].iloc[0]
    # ISO 8601 offsets (ISO 8601-1:2019 section 4.3.13): 09:15+01:00 and 08:15Z are the same instant
    ana = view[(view["coder"] == "ana") & (view["learner"] == "L01")].iloc[0]
    assert ana["window_start"] == pd.Timestamp("2026-03-02T08:15:00Z")
    assert ben["device"] == "tablet-2" and ana["device"] == "ana"
    assert ana["window_end"] - ana["window_start"] == pd.Timedelta(seconds=load_study(study).window_seconds)
    assert view.loc[view["learner"].eq("L02"), "note"].item() == "looked away"
    assert pd.isna(view.loc[view["learner"].eq("L02"), "affect"].item())


def test_bad_rows_stop_the_import_and_name_their_lines(study: Path, tmp_path: Path) -> None:
    csv = write(tmp_path, GOOD + "ana,L77,2026-03-02T09:16:00+01:00,,,on_task,\n"
                "ana,L03,2026-03-02T09:16:20,,,on_task,\nana,L04,2026-03-02T09:16:40+01:00,,,dancing,\n")
    result = call_cli("import", study, csv)
    assert_user_error(result, "codes.csv", "line 5: learner 'L77' not in roster.csv", "line 6", "no UTC offset",
                      "line 7", "unknown activity code 'dancing'",
                      "(activity codes: on_task, task_discussion, off_task, rapid_guessing, away, not_visible)",
                      "--skip-bad")
    with Store(study / "observations.sqlite") as store:
        assert store.observations().empty, "a failed import must write nothing"


def test_skip_bad_imports_the_rest_and_reports_what_it_skipped(study: Path, tmp_path: Path) -> None:
    csv = write(tmp_path, GOOD + "ana,L03,not a time,,,on_task,\n")
    result = call_cli("import", study, csv, "--skip-bad")
    assert result.returncode == 0
    assert "added 3 observations" in result.stdout and "skipped line 5: time is not an ISO 8601 time" in result.stdout


@pytest.mark.parametrize("text, needle", [
    ("", "empty file"),
    ("coder,learner,activity\nana,L01,on_task\n", "missing column 'time'"),
    ("coder,learner,time,mood\nana,L01,2026-03-02T09:15:00Z,ok\n", "unknown column 'mood'"),
    ("coder,learner,time,activity\n", "no rows"),
])
def test_malformed_csv_files(study: Path, tmp_path: Path, text: str, needle: str) -> None:
    assert_user_error(call_cli("import", study, write(tmp_path, text)), "codes.csv", needle)


def test_another_devices_store_imports_once(study: Path, tmp_path: Path) -> None:
    scheme_hash = load_study(study).scheme.content_hash
    t0 = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)
    device_path = tmp_path / "device.sqlite"
    with Store(device_path) as device:
        sid = device.start_session(coder="ben", device="tablet-2", mode="live", started_at=t0, monotonic_start=0.0,
                                   window_seconds=20, order="fixed", seed=1, scheme_hash=scheme_hash)
        device.record_observation(session_id=sid, learner="L02", window_start=t0, window_end=t0 + timedelta(seconds=20),
                                  coded_at=t0 + timedelta(seconds=8), codes={"activity": "away", "affect": "unclear"},
                                  scheme_hash=scheme_hash, slot=0)
    first = call_cli("import", study, device_path)
    assert first.returncode == 0 and "1 observations" in first.stdout
    assert "nothing new" in call_cli("import", study, device_path).stdout


def test_a_store_coded_with_codes_the_scheme_lacks_is_refused(study: Path, tmp_path: Path) -> None:
    # Compatibility, not the scheme's hash: another hash is fine, a code the scheme lacks is not.
    t0 = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)
    with Store(tmp_path / "device.sqlite") as device:
        session = device.start_session(coder="ben", device="t", mode="live", started_at=t0, monotonic_start=0.0,
                                       window_seconds=20, order="fixed", seed=1, scheme_hash="0123456789abcdef")
        device.record_code(observation_id="o1", session_id=session, learner="L01", window_start=t0,
                           window_end=t0 + timedelta(seconds=20), dimension="activity", code="dancing",
                           entered_at=t0 + timedelta(seconds=3), scheme_hash="0123456789abcdef")
    assert_user_error(call_cli("import", study, tmp_path / "device.sqlite"), "device.sqlite", "'dancing'",
                      "not a code of dimension 'activity'")


def test_a_device_store_with_an_unknown_code_names_it_and_lists_the_dimensions_codes(study: Path, tmp_path: Path) -> None:
    scheme_hash = load_study(study).scheme.content_hash
    t0 = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)
    device_path = tmp_path / "device.sqlite"
    with Store(device_path) as device:
        sid = device.start_session(coder="ben", device="tablet-2", mode="live", started_at=t0, monotonic_start=0.0,
                                   window_seconds=20, order="fixed", seed=1, scheme_hash=scheme_hash)
        device.record_observation(session_id=sid, learner="L02", window_start=t0, window_end=t0 + timedelta(seconds=20),
                                  coded_at=t0 + timedelta(seconds=8), codes={"affect": "sleepy"},
                                  scheme_hash=scheme_hash, slot=0)
    assert_user_error(call_cli("import", study, device_path), "device.sqlite", "code 'sleepy'",
                      "(its codes: focused, confused, frustrated, bored, unclear)")


def test_a_spreadsheet_saved_csv_with_bom_and_crlf_imports(study: Path, tmp_path: Path) -> None:
    roster = study / "roster.csv"  # the roster re-saved by a spreadsheet program as well
    roster.write_bytes(b"\xef\xbb\xbf" + roster.read_bytes().replace(b"\n", b"\r\n"))
    csv = tmp_path / "codes.csv"
    csv.write_bytes(b"\xef\xbb\xbf" + GOOD.replace("\n", "\r\n").encode())
    result = call_cli("import", study, csv)
    assert result.returncode == 0, result.stderr
    with Store(study / "observations.sqlite") as store:
        assert sorted(store.observations(["activity", "affect"])["learner"]) == ["L01", "L01", "L02"]
