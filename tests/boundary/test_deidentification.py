"""De-identification by allow-list, and the scheme bound to what was coded, through `fieldmark export`.

The leak test writes identifying values into every roster column and then scans every
byte of every file the export wrote (data, manifest, anything else in the folder).
"""
from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pytest

from export.pseudonyms import pseudonym
from export.reader import read_windows
from observer_app.study.store import Store
from tests.boundary.corpus import DEMO_STUDY, make_study
from tests.conftest import assert_user_error, call_cli

DEVICES = ("laptop-a", "laptop-b")


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_study(tmp_path_factory.mktemp("deid") / "study")


@pytest.fixture
def study(pristine: Path, tmp_path: Path) -> Path:
    return Path(shutil.copytree(pristine, tmp_path / "study"))


def write_roster(study: Path, extra: dict[str, list[str]]) -> pd.DataFrame:
    roster = pd.read_csv(study / "roster.csv", dtype=str, comment="#")
    for column, values in extra.items():
        roster[column] = values
    roster.to_csv(study / "roster.csv", index=False)
    return roster


def every_exported_byte(folder: Path) -> bytes:
    return b"".join(path.read_bytes() for path in sorted(folder.iterdir()) if path.is_file())


def test_identifying_values_in_every_roster_column_never_reach_any_exported_file(study: Path, tmp_path: Path) -> None:
    learners = 12
    roster = write_roster(study, {
        "label": [f"Jordan Q. Example {n}" for n in range(learners)],          # a full name where a seat belongs
        "email": [f"learner{n}@mail.example.org" for n in range(learners)],
        "phone": [f"+99 555 01{n:02d}" for n in range(learners)],
        "site": ["north"] * 6 + ["south"] * 6,
        "cohort": ["A"] * 6 + ["B"] * 6,
    })
    out_folder = tmp_path / "exported"
    out_folder.mkdir()
    result = call_cli("export", study, "--out", out_folder / "windows.csv", "--attribute", "site")
    assert result.returncode == 0, result.stderr
    data = every_exported_byte(out_folder)
    secret = []
    for column in ("learner", "label", "log_id", "email", "phone", "cohort"):
        secret += list(roster[column])
    secret += list(DEVICES)
    for value in secret:
        assert value.encode() not in data, value
    assert b"north" in data                                      # the positive control: the listed attribute is there
    table, manifest = read_windows(out_folder / "windows.csv")
    assert manifest["attribute_columns"] == ["site"]
    key = (study / "secret.key").read_bytes()
    assert {model["device"] for model in manifest["clock_models"]} <= {pseudonym(d, key) for d in DEVICES}


def test_no_attribute_leaves_unless_listed(study: Path, tmp_path: Path) -> None:
    out = tmp_path / "w.csv"
    assert call_cli("export", study, "--out", out).returncode == 0
    table, manifest = read_windows(out)
    assert manifest["attribute_columns"] == [] and not {"site", "cohort"} & set(table.columns)


def test_study_toml_lists_the_attributes(study: Path, tmp_path: Path) -> None:
    with open(study / "study.toml", "a") as handle:
        handle.write('\n[export]\nattributes = ["site", "cohort"]\n')
    out = tmp_path / "w.csv"
    assert call_cli("export", study, "--out", out).returncode == 0
    assert read_windows(out)[1]["attribute_columns"] == ["site", "cohort"]


@pytest.mark.parametrize("extra, attribute, needles", [
    ({"contact": [f"l{n}@example.org" for n in range(12)]}, "contact", ("contact", "e-mail address")),
    ({"buddy": [f"L{n % 12 + 1:02d}" for n in range(1, 13)]}, "buddy", ("buddy", "learner id")),
    ({"seat": [f"n-{n}" for n in range(12)]}, "log_id", ("log_id", "never exported")),
    ({"bench": ["b1"] * 11 + ["b2"]}, "bench", ("bench", "'b2'", "held by 1", "fewer than 5")),
    ({}, "shoe_size", ("shoe_size", "no such column")),
])
def test_identifying_or_small_cell_attributes_are_refused(study: Path, tmp_path: Path, extra: dict, attribute: str,
                                                         needles: tuple[str, ...]) -> None:
    if extra:
        write_roster(study, extra)
    out = tmp_path / "w.csv"
    assert_user_error(call_cli("export", study, "--out", out, "--attribute", attribute), *needles)
    assert not out.exists()


def test_an_attribute_named_like_an_export_column_is_prefixed(study: Path, tmp_path: Path) -> None:
    write_roster(study, {"group": ["x"] * 6 + ["y"] * 6, "activity": ["p"] * 6 + ["q"] * 6})
    out = tmp_path / "w.csv"
    result = call_cli("export", study, "--out", out, "--attribute", "group", "--attribute", "activity")
    assert result.returncode == 0, result.stderr
    table, manifest = read_windows(out)
    assert manifest["attribute_columns"] == ["attribute_group", "attribute_activity"]
    assert table["group"].str.startswith("p-").all()                 # the learner group is untouched
    assert set(table["attribute_group"]) == {"x", "y"}


# -- the scheme bound to what was coded ---------------------------------------------
def edit_scheme(study: Path, old: str, new: str) -> None:
    text = (study / "scheme.toml").read_text()
    assert old in text
    (study / "scheme.toml").write_text(text.replace(old, new, 1))


def test_changing_labels_keys_and_colours_is_fine(study: Path, tmp_path: Path) -> None:
    edit_scheme(study, 'label = "Working on the panel"', 'label = "Wiring the panel"')
    edit_scheme(study, 'colour = "#5B8DB8"', 'colour = "#123456"')
    assert call_cli("export", study, "--out", tmp_path / "w.csv").returncode == 0
    assert call_cli("agree", study, "--resamples", "5").returncode == 0


@pytest.mark.parametrize("verb", ["export", "agree", "import", "adjudicate"])
def test_a_coded_code_removed_from_the_scheme_is_refused_with_its_count(study: Path, tmp_path: Path, verb: str) -> None:
    with Store(study / "observations.sqlite") as store:  # the count, read through the store's own current view
        count = int((store.observations(["activity"])["activity"] == "rapid_guessing").sum())
    assert count > 0
    edit_scheme(study, 'name = "rapid_guessing"', 'name = "guessing"')     # a rename is a removal plus an addition
    (tmp_path / "x.csv").write_text("coder,learner,time,activity\nana,L01,2026-03-10T08:55:30+01:00,on_task\n")
    argv = {"export": ["export", study, "--out", tmp_path / "w.csv"], "agree": ["agree", study],
            "import": ["import", study, tmp_path / "x.csv"], "adjudicate": ["adjudicate", study, tmp_path / "x.csv"]}
    assert_user_error(call_cli(*argv[verb]), "scheme.toml", "'rapid_guessing'", f"{count} times", "old name")


def test_a_device_coded_with_other_labels_still_imports(study: Path) -> None:
    """The device's sessions carry the old scheme hash; its codes are all in the scheme, so it comes in."""
    edit_scheme(study, 'label = "Working on the panel"', 'label = "Wiring the panel"')
    device = study.parent / "devices-copy.sqlite"
    shutil.copyfile(DEMO_STUDY.parent / "devices" / "laptop-a" / "observations.sqlite", device)
    result = call_cli("import", study, device)
    assert result.returncode == 0, result.stderr


def test_a_rename_is_a_recorded_decision_that_every_read_applies(study: Path, tmp_path: Path) -> None:
    with Store(study / "observations.sqlite") as store:
        count = int((store.observations(["activity"])["activity"] == "rapid_guessing").sum())
    edit_scheme(study, 'name = "rapid_guessing"', 'name = "guessing"')
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.csv"), "fieldmark recode")
    result = call_cli("recode", study, "activity", "rapid_guessing", "guessing", "--reason", "shorter name")
    assert result.returncode == 0, result.stderr
    assert f"{count} activity codes" in result.stdout
    assert call_cli("export", study, "--out", tmp_path / "w.csv").returncode == 0
    table, _ = read_windows(tmp_path / "w.csv")
    assert "guessing" in set(table["activity"].dropna()) and "rapid_guessing" not in set(table["activity"].dropna())
    with Store(study / "observations.sqlite") as store:
        assert (store.observations(["activity"])["activity"] == "guessing").sum() == count
        assert "rapid_guessing" in set(store.codes_log()["code"])        # the rows as coded stay in the audit trail
        assert store.code_mappings()["reason"].tolist() == ["shorter name"]
    assert call_cli("verify", study).returncode == 0


@pytest.mark.parametrize("old, new, needle", [
    ("rapid_guessing", "dancing", "'dancing' is not one of its codes"),
    ("rapid_guessing", "on_task", "'rapid_guessing' is still one of its codes"),
])
def test_recode_refuses_what_would_not_be_a_rename(study: Path, old: str, new: str, needle: str) -> None:
    assert_user_error(call_cli("recode", study, "activity", old, new), needle)


def test_recode_refuses_a_code_never_coded(study: Path) -> None:
    edit_scheme(study, 'name = "rapid_guessing"', 'name = "guessing"')
    assert_user_error(call_cli("recode", study, "activity", "sleeping", "guessing"), "'sleeping' was never coded")


def test_an_interrupted_session_resumes_after_a_label_change_but_not_after_a_removal(study: Path) -> None:
    from datetime import datetime, timezone

    from observer_app.coding.live import find_interrupted_session
    from observer_app.study.folder import load_study

    with Store(study / "observations.sqlite") as store:
        session = store.start_session(coder="ana", device="laptop-c", mode="live", monotonic_start=0.0,
                                      started_at=datetime(2026, 3, 12, 9, tzinfo=timezone.utc), window_seconds=20,
                                      order="fixed", seed=1, scheme_hash=load_study(study).scheme.content_hash)
    edit_scheme(study, 'label = "Working on the panel"', 'label = "Wiring the panel"')   # a new hash, same codes
    with Store(study / "observations.sqlite") as store:
        found = find_interrupted_session(load_study(study), store, "laptop-c")
    assert found is not None and found.session_id == session
    edit_scheme(study, 'name = "rapid_guessing"', 'name = "guessing"')                  # coded code gone
    with Store(study / "observations.sqlite") as store:
        assert find_interrupted_session(load_study(study), store, "laptop-c") is None
