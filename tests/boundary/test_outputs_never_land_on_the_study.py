"""Outputs: never onto a study's files, replaced only with --force, data and manifest honest as a pair.

Two renames cannot be atomic together (POSIX rename(2) is atomic per file), so the
manifest beside the data records the data's SHA-256 and readers refuse a mismatch.
"""
from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

from export.reader import read_windows
from export.writer import DATA_DIGEST_KEY, manifest_path
from tests.boundary.corpus import make_study
from tests.conftest import assert_user_error, call_cli


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_study(tmp_path_factory.mktemp("outputs") / "study")


@pytest.fixture
def study(pristine: Path, tmp_path: Path) -> Path:
    return Path(shutil.copytree(pristine, tmp_path / "study"))


@pytest.mark.parametrize("name", ["observations.sqlite", "observations.sqlite-wal", "secret.key", "study.toml",
                                  "scheme.toml", "roster.csv", "logs/tiny.csv", "logs/new.parquet"])
def test_export_never_writes_onto_a_study_file(study: Path, name: str) -> None:
    target = study / name
    before = target.read_bytes() if target.is_file() else None
    assert_user_error(call_cli("export", study, "--out", target, "--force"), name.split("/")[-1], "study's own files")
    assert (target.read_bytes() if target.is_file() else None) == before


def test_a_log_outside_the_study_folder_is_protected_too(study: Path, tmp_path: Path) -> None:
    outside = tmp_path / "shared-logs" / "north.csv"
    outside.parent.mkdir()
    shutil.copyfile(study / "logs" / "tiny.csv", outside)
    text = (study / "study.toml").read_text().replace('path = "logs/tiny.csv"', f'path = "{outside}"')
    (study / "study.toml").write_text(text)
    assert_user_error(call_cli("export", study, "--out", outside, "--force"), "north.csv", "study's own files")


def test_agree_outputs_are_protected_the_same_way(study: Path) -> None:
    assert_user_error(call_cli("agree", study, "--report", study / "scheme.toml", "--force"), "scheme.toml")
    assert_user_error(call_cli("agree", study, "--disagreements", study / "observations.sqlite"), "observations.sqlite")


def test_an_existing_output_is_replaced_only_with_force(study: Path, tmp_path: Path) -> None:
    out = tmp_path / "w.csv"
    assert call_cli("export", study, "--out", out).returncode == 0
    first = out.read_bytes()
    assert_user_error(call_cli("export", study, "--out", out), "w.csv", "--force")
    assert out.read_bytes() == first
    assert call_cli("export", study, "--out", out, "--force").returncode == 0


def test_a_folder_as_out_is_a_clear_error(study: Path, tmp_path: Path) -> None:
    assert_user_error(call_cli("export", study, "--out", tmp_path), "is a folder", "windows.parquet")


def test_a_data_file_without_its_own_manifest_is_refused(study: Path, tmp_path: Path) -> None:
    """An export killed between its two renames leaves new data beside the old manifest."""
    out = tmp_path / "w.csv"
    assert call_cli("export", study, "--out", out).returncode == 0
    manifest = json.loads(manifest_path(out).read_text())
    assert manifest[DATA_DIGEST_KEY]
    read_windows(out)                                            # the pair as written reads back
    with open(out, "a") as handle:                               # new data, old manifest
        handle.write(out.read_text().splitlines()[1] + "\n")
    assert_user_error(call_cli("check", out), "w.manifest.json", DATA_DIGEST_KEY, "does not match")


def test_stale_temporary_files_are_removed_by_the_next_export(study: Path, tmp_path: Path) -> None:
    dead = 2**22 + 12345                                        # above the usual pid_max, so no such process
    assert not _alive(dead)
    stale = [tmp_path / f".w.csv.{dead}.partial", tmp_path / f".w.manifest.json.{dead}.partial"]
    for path in stale:
        path.write_text("half")
    live = tmp_path / f".other.csv.{os.getpid()}.partial"      # a running export's file stays
    live.write_text("busy")
    assert call_cli("export", study, "--out", tmp_path / "w.csv").returncode == 0
    assert not any(path.exists() for path in stale) and live.exists()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True
