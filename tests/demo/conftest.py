"""Demo fixtures: each generated demo is built once per test session, and a comparison
of two generator outputs (text byte for byte, Parquet and SQLite by their contents)."""
from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pandas as pd
import pytest

from demo_sessions.generate import generate_demo
from observer_app.study.store import Store

SEED = 11  # test_generator_determinism.py relies on this value


@pytest.fixture(scope="session")
def full_demo(tmp_path_factory) -> Path:
    """The full demo, seed 11 (the generator's output folder)."""
    out = tmp_path_factory.mktemp("demo-full")
    generate_demo(out, SEED, "full")
    return out


def _contents(path: Path) -> object:
    """What must be identical in a file: bytes for text and keys, tables for Parquet and SQLite."""
    if path.suffix == ".parquet":
        return pd.read_parquet(path)
    if path.suffix == ".sqlite":
        # read a copy: opening a store may migrate it, and the committed copy must stay untouched
        scratch = Path(tempfile.mkdtemp()) / path.name
        shutil.copy(path, scratch)
        with Store(scratch) as store:
            return {"sessions": store.sessions(), "observations": store.observations(),
                    "sync_marks": store.sync_marks(), "codes": store.codes_log(), "absences": store.absences()}
    return path.read_bytes()


def _files(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())


def assert_same_output(first: Path, second: Path) -> None:
    """Same file names; identical bytes, identical tables."""
    assert _files(first) == _files(second)
    for name in _files(first):
        one, two = _contents(first / name), _contents(second / name)
        if isinstance(one, dict):
            for table in one:
                pd.testing.assert_frame_equal(one[table], two[table], obj=f"{name}:{table}")
        elif isinstance(one, pd.DataFrame):
            pd.testing.assert_frame_equal(one, two, obj=name)
        else:
            assert one == two, f"{name} differs"


@pytest.fixture
def same_output():
    return assert_same_output
