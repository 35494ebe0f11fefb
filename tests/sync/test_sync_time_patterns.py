"""Log times as labs' systems write them: strftime patterns in time_format, and errors
that name the value, the row and a pattern that fits (sync/time_column.py), driven
through `fieldmark export` on a small study of our own."""
from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from tests.conftest import assert_user_error, call_cli
from tests.export.small_studies import LOG_IDS, solo_laptops_study, write_log

BERLIN = "Europe/Berlin"


def set_time_format(study: Path, time_format: str) -> None:
    toml = study / "study.toml"
    toml.write_text(toml.read_text().replace('time_format = "auto"', f'time_format = "{time_format}"'))


def local(moment: pd.Timestamp, pattern: str) -> str:
    """The moment as a Berlin wall-clock text in ``pattern`` (no offset), as many lab systems log it."""
    return moment.tz_convert(BERLIN).strftime(pattern)


def export_table(study: Path, out: Path) -> pd.DataFrame:
    result = call_cli("export", study, "--out", out, "--keep-ids", "--json")
    assert result.returncode == 0, result.stderr
    return pd.read_parquet(out)


@pytest.mark.parametrize("pattern", ["%m/%d/%Y %H:%M:%S", "%d.%m.%Y %H:%M:%S"])
def test_a_strftime_pattern_reads_the_log_like_iso_8601(tmp_path: Path, pattern: str) -> None:
    iso = solo_laptops_study(tmp_path / "iso")
    patterned = solo_laptops_study(tmp_path / "patterned")
    write_log(patterned, LOG_IDS, stamp=lambda moment: local(moment, pattern))
    set_time_format(patterned, pattern)
    expected = export_table(iso, tmp_path / "iso.parquet")
    got = export_table(patterned, tmp_path / "patterned.parquet")
    assert got["event_count"].sum() > 0
    pd.testing.assert_frame_equal(got.drop(columns=["window_id"]), expected.drop(columns=["window_id"]))


def test_a_minute_pattern_reads_minutes(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    write_log(study, LOG_IDS, stamp=lambda moment: local(moment, "%d.%m.%Y %H:%M"))
    set_time_format(study, "%d.%m.%Y %H:%M")
    table = export_table(study, tmp_path / "w.parquet")
    # every event of a learner's first minute is read as 08:00 UTC (09:00 in Berlin, winter time)
    assert table["event_count"].sum() > 0


def test_unreadable_times_name_value_row_and_the_pattern_that_fits(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    write_log(study, LOG_IDS, stamp=lambda moment: local(moment, "%d.%m.%Y %H:%M"))
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.parquet"),
                      "centre_north.csv", "column timestamp, row 1", "'03.03.2026 09:00' could not be read as a time",
                      'time_format = "%d.%m.%Y %H:%M" reads every value')


def test_day_first_and_month_first_both_fitting_are_both_named_and_neither_picked(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)  # 3 March: 03/03 reads the same either way ...
    write_log(study, LOG_IDS, stamp=lambda moment: local(moment, "%d/%m/%Y %H:%M:%S"))
    result = call_cli("export", study, "--out", tmp_path / "w.parquet")
    assert_user_error(result, "'03/03/2026 09:00:00' could not be read as a time", '"%d/%m/%Y %H:%M:%S" (day first)',
                      '"%m/%d/%Y %H:%M:%S" (month first)', "set the one your system writes")
    assert not (tmp_path / "w.parquet").exists()


def test_a_row_that_does_not_match_the_pattern_is_named(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    write_log(study, LOG_IDS, stamp=lambda moment: local(moment, "%m/%d/%Y %H:%M:%S"))
    log = study / "logs" / "centre_north.csv"
    lines = log.read_text().splitlines()
    lines[5] = lines[5].replace("03/03/2026", "2026-03-03")
    log.write_text("\n".join(lines) + "\n")
    set_time_format(study, "%m/%d/%Y %H:%M:%S")
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.parquet"), "column timestamp, row 5",
                      "'2026-03-03 09:00:08' could not be read as a time with time_format \"%m/%d/%Y %H:%M:%S\"")


@pytest.mark.parametrize("bad", ["%H:%M", "day.month.year", "%d.%m.%Y %Q"])
def test_a_pattern_without_a_whole_date_and_time_is_refused(tmp_path: Path, bad: str) -> None:
    study = solo_laptops_study(tmp_path, align=False)
    set_time_format(study, bad)
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.parquet"), "study.toml", "key time_format",
                      "strftime pattern")


def test_the_study_template_shows_time_format_and_its_example_pattern_works(tmp_path: Path) -> None:
    study = solo_laptops_study(tmp_path)
    text = (study / "study.toml").read_text()
    assert 'time_format = "auto"' in text and '"%m/%d/%Y %H:%M:%S"' in text
    write_log(study, LOG_IDS, stamp=lambda moment: local(moment, "%m/%d/%Y %H:%M:%S"))
    (study / "study.toml").write_text(text.replace('time_format = "auto"', 'time_format = "%m/%d/%Y %H:%M:%S"'))
    assert export_table(study, tmp_path / "w.parquet")["event_count"].sum() > 0


def _log_with_row_5(study: Path, text: str, pattern: str | None = None) -> None:
    """The study's log with row 5's time replaced by ``text``."""
    if pattern:
        write_log(study, LOG_IDS, stamp=lambda moment: local(moment, pattern))
        set_time_format(study, pattern)
    log = study / "logs" / "centre_north.csv"
    lines = log.read_text().splitlines()
    cells = lines[5].split(",")
    column = lines[0].split(",").index("timestamp")
    cells[column] = text
    lines[5] = ",".join(cells)
    log.write_text("\n".join(lines) + "\n")


@pytest.mark.parametrize("text", ["half past nine", "2026-13-45T09:00:00Z"])
def test_text_that_is_no_time_is_said_to_be_unreadable_not_out_of_range(tmp_path: Path, text: str) -> None:
    study = solo_laptops_study(tmp_path)
    _log_with_row_5(study, text)
    result = call_cli("export", study, "--out", tmp_path / "w.parquet")
    assert_user_error(result, "centre_north.csv", "column timestamp, row 5", f"'{text}' could not be read as a time",
                      "ISO 8601", "epoch", 'time_format = "<strftime pattern>"', "study.toml")
    assert "1990" not in result.stderr
    assert not (tmp_path / "w.parquet").exists()


@pytest.mark.parametrize(("text", "pattern"), [("1500-03-03T09:00:08+01:00", None),
                                               ("2187-03-03T09:00:08Z", None),
                                               ("03/03/1889 09:00:08", "%m/%d/%Y %H:%M:%S")])
def test_a_time_that_reads_but_lies_outside_1990_to_2100_keeps_the_range_message(
        tmp_path: Path, text: str, pattern: str | None) -> None:
    study = solo_laptops_study(tmp_path)
    _log_with_row_5(study, text, pattern)
    result = call_cli("export", study, "--out", tmp_path / "w.parquet")
    assert_user_error(result, "centre_north.csv", "column timestamp, row 5", f"'{text}' is not a time between 1990 and 2100")
    assert "could not be read" not in result.stderr
