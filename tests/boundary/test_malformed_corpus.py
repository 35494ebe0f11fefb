"""Every malformed input of tests/boundary/corpus.py: one line and exit 2, never a traceback,
a hang, a silent acceptance or a changed study; unusual but valid inputs (a UTF-8 byte
order mark, an xAPI file holding a single statement) are accepted.
"""
from __future__ import annotations

from pathlib import Path

import pytest

from tests.boundary.corpus import Case, all_cases, make_study, materialise, snapshot, store_rows
from tests.conftest import assert_user_error, call_cli

CASES = all_cases()


def test_the_corpus_is_large_and_covers_every_verb() -> None:
    assert len(CASES) >= 150
    assert len({case.name for case in CASES}) == len(CASES)
    verbs = {case.argv[0] for case in CASES}
    assert verbs >= {"import", "align", "agree", "adjudicate", "export", "check", "plan", "verify"}


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_study(tmp_path_factory.mktemp("pristine") / "study")


@pytest.mark.timeout(120)
@pytest.mark.parametrize("case", CASES, ids=str)
def test_malformed_input(case: Case, pristine: Path, tmp_path: Path) -> None:
    import shutil

    study = tmp_path / "study"
    shutil.copytree(pristine, study)
    argv, out = materialise(case, study, tmp_path / "outside")
    before, rows_before = snapshot(study), store_rows(study / "observations.sqlite")
    result = call_cli(*argv)
    if case.expect == "accepted":
        assert result.returncode == 0, (result.returncode, result.stderr)
        return
    assert_user_error(result, *case.needles)
    assert store_rows(study / "observations.sqlite") == rows_before
    after = snapshot(study)
    assert {k: v for k, v in after.items() if k != "observations.sqlite"} == \
        {k: v for k, v in before.items() if k != "observations.sqlite"}
    assert not out.exists()
