"""Every validation rule of the study folder, through the real command line.

Each broken study must exit 2 with exactly one stderr line naming the file and the
key or line, and no traceback (DESIGN.md, "Command line").
"""
from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from observer_app.study.folder import load_study
from sync.errors import InputWarning
from tests.conftest import assert_user_error, call_cli, run_cli


@pytest.fixture
def study(tmp_path: Path) -> Path:
    folder = tmp_path / "study"
    result = call_cli("init", folder)
    assert result.returncode == 0, result.stderr
    return folder


def replace(path: Path, old: str, new: str, count: int = 1) -> None:
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, count))


def check(study: Path, *needles: str) -> None:
    """Loading is exercised through `fieldmark import`, which loads the study first."""
    csv = study / "x.csv"
    csv.write_text("coder,learner,time,activity\nana,L01,2026-03-02T09:15:00+01:00,on_task\n")
    assert_user_error(call_cli("import", study, csv), *needles)


def test_init_templates_load_and_teach(study: Path) -> None:
    loaded = load_study(study)
    assert loaded.scheme.dimension_names == ("activity", "affect")
    for name in ("study.toml", "scheme.toml", "roster.csv"):
        assert (study / name).read_text().startswith("#"), f"{name} should open with comments that teach the format"
    assert stat.S_IMODE(os.stat(study / "secret.key").st_mode) == 0o600
    assert (study / "secret.key").stat().st_size == 32


def test_init_refuses_a_folder_that_is_not_empty(study: Path) -> None:
    # through the installed entry point in a subprocess: proves no traceback reaches the user
    assert_user_error(run_cli("init", study), str(study), "not empty")


def test_unknown_key_in_scheme(study: Path) -> None:
    replace(study / "scheme.toml", 'level = "nominal"', 'level = "nominal"\ncolor = "red"')
    check(study, "scheme.toml", "color", "unknown key")


def test_unknown_key_in_study(study: Path) -> None:
    replace(study / "study.toml", "seed = 1", "seed = 1\nwindow = 5")
    check(study, "study.toml", "schedule.window", "unknown key")


def test_duplicate_code_name(study: Path) -> None:
    replace(study / "scheme.toml", 'name = "task_discussion"', 'name = "on_task"')
    check(study, "scheme.toml", "activity", "duplicate code name 'on_task'")


def test_shortcut_key_used_twice_anywhere_in_scheme(study: Path) -> None:
    # key "q" belongs to affect.focused; giving it to an activity code must be caught across dimensions
    replace(study / "scheme.toml", 'key = "2"', 'key = "q"')
    check(study, "scheme.toml", "shortcut 'q'")


def test_dimension_without_could_not_observe_code(study: Path) -> None:
    replace(study / "scheme.toml", 'could_not_observe = "unclear"\n', "")
    check(study, "scheme.toml", "affect", "could_not_observe")


def test_could_not_observe_must_name_a_code(study: Path) -> None:
    replace(study / "scheme.toml", 'could_not_observe = "unclear"', 'could_not_observe = "hidden"')
    check(study, "scheme.toml", "'hidden' is not one of this dimension's codes")


def test_unknown_iana_time_zone(study: Path) -> None:
    replace(study / "study.toml", 'timezone = "Europe/Berlin"', 'timezone = "Europe/Atlantis"')
    check(study, "study.toml", "study.timezone", "unknown IANA time zone")


def test_invalid_level(study: Path) -> None:
    replace(study / "scheme.toml", 'level = "nominal"', 'level = "interval"')
    check(study, "scheme.toml", "level", "invalid level 'interval'")


def test_invalid_schedule_order(study: Path) -> None:
    replace(study / "study.toml", 'order = "shuffled"', 'order = "random"')
    check(study, "study.toml", "schedule.order")


def test_malformed_toml_names_the_line(study: Path) -> None:
    replace(study / "scheme.toml", '[scheme]', '[scheme')
    check(study, "scheme.toml", "line")


def test_duplicate_learner_in_roster(study: Path) -> None:
    with (study / "roster.csv").open("a") as handle:
        handle.write("L02,Bench 9,n-0009,north,A\n")
    check(study, "roster.csv", "line 11", "duplicate learner 'L02'")


def test_roster_missing_column(study: Path) -> None:
    replace(study / "roster.csv", "learner,label,log_id,site,cohort", "learner,label,site,cohort")
    (study / "roster.csv").write_text("\n".join(
        line.rsplit(",", 1)[0] if not line.startswith("#") and not line.startswith("learner") else line
        for line in (study / "roster.csv").read_text().splitlines()) + "\n")
    check(study, "roster.csv", "missing column 'log_id'")


def test_learner_without_log_id_is_a_warning_not_an_error(study: Path) -> None:
    replace(study / "roster.csv", "L03,Bench 3,n-0003", "L03,Bench 3,")
    with pytest.warns(InputWarning, match="learner 'L03' has no log_id"):
        loaded = load_study(study)
    assert len(loaded.roster) == 4
    assert any("L03" in warning and "log_id" in warning for warning in loaded.warnings)
    codes = study / "codes.csv"
    codes.write_text("coder,learner,time,activity\nann,L01,2026-03-02T09:00:00+01:00,on_task\n")
    shown = call_cli("import", study, codes)  # a verb that loads the study says it once, as a note
    assert shown.returncode == 0, shown.stderr
    assert shown.stderr.count("note:") == 1 and "fieldmark import: note: " in shown.stderr
    assert "'L03' has no log_id" in shown.stderr


def test_scheme_hash_ignores_comments_but_not_content(study: Path) -> None:
    before = load_study(study).scheme.content_hash
    replace(study / "scheme.toml", "# scheme.toml", "# scheme.toml (edited comment)")
    assert load_study(study).scheme.content_hash == before
    replace(study / "scheme.toml", 'label = "Off task"', 'label = "Not on task"')
    assert load_study(study).scheme.content_hash != before


def test_not_a_study_folder(tmp_path: Path) -> None:
    csv = tmp_path / "x.csv"
    csv.write_text("coder,learner,time,activity\n")
    assert_user_error(call_cli("import", tmp_path / "nowhere", csv), "nowhere", "fieldmark init")


def test_a_bad_logs_entry_is_caught_when_the_study_loads(study: Path) -> None:
    # caught at the boundary, before any command reads a log
    replace(study / "study.toml", 'format = "csv"', 'format = "excel"')
    check(study, "study.toml", "[[logs]] #1", "format")
