"""The hour-off mistakes labs make with clocks, caught before labels land on the wrong hour.

A study of our own (tests/export/small_studies.py: init, import, align through the real
command line).  Its date, 2026-03-03, lies in central European standard time: Europe/Berlin
is at UTC+01:00 until the last Sunday of March (EU summer time, Directive 2000/84/EC,
Article 2; common practice).  Coder ben's laptop is set to summer time a month early and
writes his windows' local wall times with +02:00: exact instants, an hour early.
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from tests.conftest import assert_user_error, call_cli
from tests.export import small_studies


def _summer_time_slip(table: pd.DataFrame) -> pd.DataFrame:
    """ben's rows as his laptop writes them: Berlin wall time, labelled +02:00 (one hour too much)."""
    table = table.copy()
    is_ben = table["coder"] == "ben"
    wall = pd.to_datetime(table.loc[is_ben, "time"], utc=True).dt.tz_convert("Europe/Berlin").dt.tz_localize(None)
    table.loc[is_ben, "time"] = wall.dt.strftime("%Y-%m-%dT%H:%M:%S+02:00")
    return table


def _study_with_slip(tmp_path: Path, *import_options: str) -> tuple[Path, Path]:
    study = small_studies.solo_laptops_study(tmp_path, offset_s=0.0, align=False)
    codes = tmp_path / "codes_slip.csv"
    slipped = _summer_time_slip(small_studies.coded_windows(0.0))
    slipped.assign(device=slipped["device"] + "-slip").to_csv(codes, index=False)
    return study, codes


def test_import_refuses_a_utc_offset_the_study_zone_did_not_have(tmp_path):
    study, codes = _study_with_slip(tmp_path)
    first_ben_line = 3  # header is line 1; rows alternate ann, ben
    assert_user_error(call_cli("import", study, codes), str(codes), f"line {first_ben_line}",
                      "UTC+02:00", "UTC+01:00", "1 h off", "12 rows", "coder ben", "--offsets-as-written")


def test_utc_and_the_zones_own_offset_are_taken(tmp_path):
    study, _ = _study_with_slip(tmp_path)
    table = small_studies.coded_windows(0.0)
    berlin = pd.to_datetime(table["time"], utc=True).dt.tz_convert("Europe/Berlin")
    as_local = table.assign(time=berlin.map(lambda moment: moment.isoformat()), device="laptop-local")
    as_z = table.assign(time=pd.to_datetime(table["time"], utc=True).dt.strftime("%Y-%m-%dT%H:%M:%SZ"),
                        device="laptop-z", coder=table["coder"] + "-z")
    for name, frame in (("local.csv", as_local), ("z.csv", as_z)):
        frame.to_csv(tmp_path / name, index=False)
        result = call_cli("import", study, tmp_path / name)
        assert result.returncode == 0, result.stderr
        assert "added 24 observations" in result.stdout


def test_agree_and_export_point_at_the_device_an_hour_off(tmp_path):
    study, codes = _study_with_slip(tmp_path)
    assert call_cli("import", study, codes, "--offsets-as-written").returncode == 0
    aligned = call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=0",
                       "--set-offset", "laptop-a-slip=0", "--set-offset", "laptop-b-slip=0")
    assert aligned.returncode == 0, aligned.stderr
    agreed = call_cli("agree", study, "--json", "--resamples", "20")
    assert agreed.returncode == 0, agreed.stderr
    hints = json.loads(agreed.stdout)["pairing"]["clock_shift_hints"]
    # ben's slipped rows are an hour early on the log's clock: moved +1 h they meet ann's.
    slipped = [hint for hint in hints if hint["device"] == "laptop-b-slip"]
    assert slipped and slipped[0]["shift_hours"] == 1.0
    assert slipped[0]["would_pair"] == slipped[0]["of"] == 12
    assert all("slip" in hint["device"] or "slip" in hint["other_device"] for hint in hints)

    out = tmp_path / "windows.parquet"
    exported = call_cli("export", study, "--out", out)
    assert exported.returncode == 0, exported.stderr
    assert "laptop-b-slip's times were moved +1 h" in exported.stdout + exported.stderr
    manifest = json.loads(out.with_suffix(".manifest.json").read_text())
    recorded = [hint for hint in manifest["clock_shift_hints"] if hint["shift_hours"] == 1.0]
    assert recorded and not any("laptop" in hint["device"] + hint["other_device"] for hint in recorded)


def test_a_study_with_right_clocks_gets_no_hint(tmp_path):
    study = small_studies.solo_laptops_study(tmp_path)
    agreed = call_cli("agree", study, "--json", "--resamples", "20")
    assert agreed.returncode == 0, agreed.stderr
    assert json.loads(agreed.stdout)["pairing"]["clock_shift_hints"] == []
