"""Where a verb may write, and how: never onto a study's own files, never over a file
without --force, and always whole (``publish_text``).

Why: an export or report written over observations.sqlite, secret.key, a TOML file or a
log would destroy what the study is made of, and a typo in --out is enough to do it.
The study's files are named here once; every verb that writes checks its paths here.
"""
from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

from sync.errors import InputError

STUDY_FILES = ("observations.sqlite", "observations.sqlite-wal", "observations.sqlite-shm",
               "observations.sqlite-journal", "secret.key", "study.toml", "scheme.toml", "roster.csv")
LOGS_FOLDER = "logs"
CACHE_FOLDER = "parsed_logs"


def protected_paths(study_dir: Path, log_paths: Iterable[Path] = ()) -> tuple[list[Path], list[Path]]:
    """(files, folders) of a study that no output may touch; log paths may lie outside the folder."""
    study_dir = Path(study_dir).resolve()
    files = [study_dir / name for name in STUDY_FILES]
    folders = [study_dir / LOGS_FOLDER, study_dir / CACHE_FOLDER]
    for log in log_paths:
        resolved = Path(log).resolve()
        (folders if resolved.is_dir() else files).append(resolved)
    return files, folders


def check_output(path: Path, option: str, *, study_dir: Path | None = None, log_paths: Iterable[Path] = (),
                 force: bool = False) -> None:
    """InputError unless ``path`` is a new file (or an existing one and ``force``) outside the study's files."""
    path = Path(path)
    if path.is_dir():
        raise InputError(path, option, "is a folder; give a file name inside it, e.g. "
                         f"{path / 'windows.parquet'}")
    if not path.parent.is_dir():
        raise InputError(path, option, "its folder does not exist; create it first")
    resolved = path.resolve()
    if study_dir is not None:
        files, folders = protected_paths(study_dir, log_paths)
        if resolved in files or any(resolved.is_relative_to(folder) for folder in folders):
            raise InputError(path, option, "is one of the study's own files (store, key, TOML, roster or logs); "
                             "write the output outside them, e.g. next to the study folder")
    if path.exists() and not force:
        raise InputError(path, option, "exists already; pass --force to replace it, or choose another name")
    if path.exists() and not os.access(path, os.W_OK):
        raise InputError(path, option, "exists and cannot be replaced (read-only); choose another name")


def publish_text(path: Path, text: str) -> None:
    """Write ``text`` to a temporary name beside ``path``, then rename: a reader sees the old
    file or the whole new one, never half (the one home for text outputs: reports, CSVs,
    the demo's summary; the windows file and its manifest: export/writer.py)."""
    path = Path(path)
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".partial")
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="") as stream:
            stream.write(text)
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(temporary, 0o666 & ~mask)  # mkstemp makes the file private; give it the usual mode
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
