"""The notebook door (`import fieldmark`): README's "From Python" examples and every
docstring example of the facade run here, on a copy of the shipped demo study."""
from __future__ import annotations

import doctest
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ORDER = ("fieldmark", "fieldmark.open_study", "fieldmark.observations", "fieldmark.align",
         "fieldmark.agreement", "fieldmark.export_windows", "fieldmark.load_windows")


def _run(tests: list[doctest.DocTest], globs: dict) -> doctest.TestResults:
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    for test in tests:
        test.globs = globs  # one namespace: each example builds on the one before
        runner.run(test, clear_globs=False)
    return runner.summarize(verbose=False)


def test_readme_from_python_examples_run(tmp_path, monkeypatch):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## From Python", 1)[1].split("\n## ", 1)[0]
    test = doctest.DocTestParser().get_doctest(section, {}, "README From Python", "README.md", 0)
    assert len(test.examples) >= 10
    monkeypatch.chdir(tmp_path)
    results = _run([test], {})
    assert results.failed == 0 and results.attempted == len(test.examples)


def test_facade_docstring_examples_run(tmp_path):
    import fieldmark
    from demo_sessions import committed_copy

    found = {test.name: test for test in doctest.DocTestFinder().find(fieldmark) if test.examples}
    assert set(found) == set(ORDER)
    globs = {"fieldmark": fieldmark, "demo_copy": shutil.copytree(committed_copy(), tmp_path / "study"),
             "scratch": tmp_path}
    results = _run([found[name] for name in ORDER], globs)
    assert results.failed == 0 and results.attempted >= len(ORDER)


@pytest.mark.parametrize("name", ORDER[1:])
def test_facade_functions_have_numpydoc_sections(name):
    import fieldmark

    doc = getattr(fieldmark, name.split(".")[1]).__doc__
    for heading in ("Parameters\n", "Returns\n", "Examples\n"):
        assert heading in doc, (name, heading)
