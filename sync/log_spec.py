"""One ``[[logs]]`` entry of study.toml, validated: where a log is and how to read it.

The study loader calls :func:`log_spec_from_toml` for each entry; readers trust the
result.  Whether the file exists is checked when it is read (``sync.read_logs``), so a
study whose logs are not there yet can still be opened for coding.
"""
from __future__ import annotations

import codecs
from datetime import datetime
from dataclasses import dataclass, field
from pathlib import Path
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from sync.errors import InputError

FORMATS: tuple[str, ...] = ("csv", "parquet", "xapi")
TIME_FORMATS: tuple[str, ...] = ("auto", "iso", "epoch_s", "epoch_ms")
COLUMN_ROLES: tuple[str, ...] = ("learner", "time", "action", "outcome", "item", "skill", "duration")
REQUIRED_ROLES: tuple[str, ...] = ("learner", "time")
KEYS: tuple[str, ...] = ("path", "format", "timezone", "encoding", "delimiter", "time_format", "columns")
# Which files a folder entry stands for, by format.
FOLDER_SUFFIXES: dict[str, tuple[str, ...]] = {
    "csv": (".csv", ".tsv", ".txt"),
    "parquet": (".parquet", ".pq"),
    "xapi": (".json", ".jsonl", ".ndjson", ".gz"),
}


@dataclass(frozen=True)
class LogSpec:
    """How to read one log file or folder of files.

    ``columns`` maps fieldmark's role (learner, time, action, outcome, item, skill,
    duration) to the file's column name; empty for xAPI, whose fields are fixed by the
    standard.  ``delimiter`` None means "detect"; ``timezone`` None means naive stamps
    are an error.
    """

    path: Path
    format: str
    timezone: str | None = None
    encoding: str = "utf-8"
    delimiter: str | None = None
    time_format: str = "auto"
    columns: dict[str, str] = field(default_factory=dict)
    label: str = ""

    def files(self) -> list[Path]:
        """The files this entry stands for: the path itself, or a folder's matching files
        (Parquet: also in partition folders below it, as a hive-partitioned dataset)."""
        if self.path.is_dir():
            suffixes = FOLDER_SUFFIXES[self.format]
            found = self.path.rglob("*") if self.format == "parquet" else self.path.iterdir()
            return sorted(p for p in found if p.is_file() and p.suffix.lower() in suffixes
                          and not any(part.startswith((".", "_")) for part in p.relative_to(self.path).parts))
        return [self.path]


def _where(index: int, key: str) -> str:
    return f"[[logs]] #{index} key {key}"


def _text(entry: dict, key: str, index: int) -> str | None:
    value = entry.get(key)
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise InputError("study.toml", _where(index, key), "must be a non-empty text in quotes")
    return value


def log_spec_from_toml(entry: dict, study_dir: Path, index: int) -> LogSpec:
    """Validate one ``[[logs]]`` table (``index`` counts from 1) into a :class:`LogSpec`.

    Relative paths are taken from the study folder.  Raises ``InputError`` naming the
    entry and key for unknown keys and bad values.
    """
    if not isinstance(entry, dict):
        raise InputError("study.toml", f"[[logs]] #{index}", "must be a table of keys (path, format, ...)")
    for key in entry:
        if key not in KEYS:
            raise InputError("study.toml", _where(index, key),
                             f"unknown key; use only {', '.join(KEYS)}")
    path_text = _text(entry, "path", index)
    if path_text is None:
        raise InputError("study.toml", _where(index, "path"), "is missing; give the log file or folder")
    log_format = _text(entry, "format", index)
    if log_format not in FORMATS:
        raise InputError("study.toml", _where(index, "format"),
                         f"must be one of {', '.join(FORMATS)} (got {log_format!r})")
    timezone = _text(entry, "timezone", index)
    if timezone is not None:
        try:
            ZoneInfo(timezone)
        except (ZoneInfoNotFoundError, ValueError):
            raise InputError("study.toml", _where(index, "timezone"),
                             f"{timezone!r} is not an IANA time zone; write e.g. \"Europe/Berlin\"") from None
    encoding = _text(entry, "encoding", index) or "utf-8"
    try:
        if not codecs.lookup(encoding)._is_text_encoding:
            raise LookupError(encoding)
    except LookupError:
        raise InputError("study.toml", _where(index, "encoding"),
                         f"{encoding!r} is not a known text encoding; write e.g. \"utf-8\" or \"cp1252\"") from None
    delimiter = entry.get("delimiter")
    if delimiter is not None and (not isinstance(delimiter, str) or len(delimiter) != 1 or delimiter in "\r\n\"'"):
        raise InputError("study.toml", _where(index, "delimiter"),
                         "must be one character, e.g. \",\" or \";\" or \"\\t\"; leave it out to detect")
    time_format = _text(entry, "time_format", index) or "auto"
    if time_format not in TIME_FORMATS:
        _check_pattern(time_format, index)
    columns = _columns(entry, log_format, index)
    path = Path(path_text)
    if not path.is_absolute():
        path = Path(study_dir) / path
    return LogSpec(path=path, format=log_format, timezone=timezone, encoding=encoding,
                   delimiter=delimiter, time_format=time_format, columns=columns, label=path_text)


def _check_pattern(time_format: str, index: int) -> None:
    """A strftime pattern must name year, month, day, hour and minute: it must read back
    a moment it wrote (sync/time_column.py reads it)."""
    moment = datetime(2026, 11, 23, 14, 35)
    try:
        written = moment.strftime(time_format)
        same = "%" in time_format and datetime.strptime(written, time_format).replace(tzinfo=None) == moment
    except ValueError:
        same = False
    if not same:
        raise InputError("study.toml", _where(index, "time_format"),
                         f"must be one of {', '.join(TIME_FORMATS)} or a strftime pattern with year, month, day, "
                         f"hour and minute such as \"%d.%m.%Y %H:%M\" (got {time_format!r})")


def _columns(entry: dict, log_format: str, index: int) -> dict[str, str]:
    columns = entry.get("columns")
    if log_format == "xapi":
        if columns:
            raise InputError("study.toml", _where(index, "columns"),
                             "xAPI statements have fixed fields; remove [logs.columns] from this entry")
        return {}
    if not isinstance(columns, dict):
        raise InputError("study.toml", _where(index, "columns"),
                         "is missing; add [logs.columns] with at least learner = \"...\" and time = \"...\"")
    for role, name in columns.items():
        if role not in COLUMN_ROLES:
            raise InputError("study.toml", _where(index, f"columns.{role}"),
                             f"unknown column role; use only {', '.join(COLUMN_ROLES)}")
        if not isinstance(name, str) or not name:
            raise InputError("study.toml", _where(index, f"columns.{role}"),
                             "must be the file's column name in quotes")
    for role in REQUIRED_ROLES:
        if role not in columns:
            raise InputError("study.toml", _where(index, f"columns.{role}"),
                             "is required; name the file's column that holds it")
    return dict(columns)
