"""Parsed logs kept in the study folder, so the next verb does not parse a file again.

An entry is keyed by the file's content digest (SHA-256) together with everything that
shapes the result (format, time zone, encoding, delimiter, time format, column mapping,
the learner filter): a changed file or setting misses and is parsed afresh; entries of
a file's older bytes are removed, and of its current bytes the newest ``SETTINGS_KEPT``
settings are kept; entries of files no longer among a study's logs
are removed too (``forget_all_but``, after the study's logs were read).  Entries hold
learners' log events, like logs/ itself: the folder and files are owner-only (0o700 /
0o600) and export never lists them.  Each entry is a Parquet table plus a JSON sidecar
(counts, warnings, rows read, the table's SHA-256), written to temporary names and
renamed, so a crash leaves no half entry; a table that is not the one stored (damaged,
half copied) is a miss and parsed again, never read.  A CSV or Parquet
file's entry holds its events sorted by learner, then time, in row groups of at most
``ROW_GROUP_ROWS``, and its sidecar lists each learner's event count: export reads such an
entry as blocks of whole learners (sync/sorted_parquet.py) without loading it whole.
"""
from __future__ import annotations

import hashlib
import json
import os
import uuid
from dataclasses import asdict
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from sync.file_digest import file_sha256
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec
from sync.xapi_reader import StatementPart

CACHE_VERSION = 3  # bump when what a reader produces changes (2: events sorted, learners listed;
                   # 3: an empty filter no longer shares the unfiltered key, so older entries may be wrong)
SETTINGS_KEPT = 4  # entries of one file's current bytes under different settings (learner filters) kept at once
ROW_GROUP_ROWS = 1_000_000  # what one block read from an entry holds, at most (and one learner carried)


class LogCache:
    """Load and store parsed files under ``folder`` (created owner-only on first store)."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)

    def key(self, spec: LogSpec, path: Path, only: frozenset[str] | None,
            content: str | None = None) -> tuple[str, str, str]:
        """(the file's entry prefix, the full entry name, the file's SHA-256 in hex: the one
        time it is hashed, so an export's manifest takes it from the read report).
        ``content``: the digest when this run already hashed the file."""
        if content is None:
            content = file_sha256(path)
        settings = json.dumps([CACHE_VERSION, spec.format, spec.timezone, spec.encoding, spec.delimiter,
                               spec.time_format, sorted(spec.columns.items()), None if only is None else sorted(only)])
        prefix = self.prefix(path)
        return prefix, f"{prefix}-{content[:32]}-{hashlib.sha256(settings.encode()).hexdigest()[:16]}", content

    @staticmethod
    def prefix(path: Path) -> str:
        """What every entry of this file's name starts with (its resolved path, hashed)."""
        return hashlib.sha256(str(Path(path).resolve()).encode()).hexdigest()[:16]

    def forget_all_but(self, files: list[Path]) -> None:
        """Remove the entries of every file but ``files`` (the study's logs now): a log taken
        out of the study, say because a learner withdrew consent, must not live on here."""
        if not self.folder.is_dir():
            return
        keep = {self.prefix(path) for path in files}
        for item in self.folder.iterdir():
            if item.is_file() and item.name.split("-", 1)[0] not in keep:
                item.unlink(missing_ok=True)

    def load(self, entry: str) -> tuple[pa.Table, dict] | None:
        found = self.find(entry)
        if found is None:
            return None
        try:
            return pq.read_table(found[0]), found[1]
        except (OSError, ValueError, pa.ArrowInvalid):
            return None  # unreadable entry: parse again (and overwrite it)

    def find(self, entry: str) -> tuple[Path, dict] | None:
        """The entry's table file and sidecar, without parsing the table; None when absent,
        unreadable or not the table stored (its SHA-256 differs from the sidecar's: a damaged
        or half-copied study folder, a sync tool's conflict copy), so it is parsed again."""
        table_path, meta_path = self.folder / f"{entry}.parquet", self.folder / f"{entry}.json"
        if not (table_path.exists() and meta_path.exists()):
            return None
        try:
            meta = json.loads(meta_path.read_text())
            return (table_path, meta) if meta.get("table_sha256") == file_sha256(table_path) else None
        except (OSError, ValueError, AttributeError):
            return None

    def store(self, prefix: str, entry: str, table: pa.Table, meta: dict) -> None:
        self.folder.mkdir(mode=0o700, parents=True, exist_ok=True)
        os.chmod(self.folder, 0o700)
        # Entries of this file's older bytes go; entries of its current bytes under other settings
        # stay (align, export and replay read different learners of the same file), the newest
        # SETTINGS_KEPT of them, so the verbs do not evict each other's entries on every run.
        current = entry.rsplit("-", 1)[0]
        others = []
        for stale in self.folder.glob(f"{prefix}-*"):
            if not stale.name.startswith(current):
                stale.unlink(missing_ok=True)
            elif stale.suffix == ".json" and not stale.name.startswith(entry):
                others.append(stale)
        for sidecar in sorted(others, key=lambda path: path.stat().st_mtime, reverse=True)[SETTINGS_KEPT - 1:]:
            sidecar.with_suffix(".parquet").unlink(missing_ok=True)
            sidecar.unlink(missing_ok=True)
        table_file = self._owner_only_temporary(entry, ".parquet")
        pq.write_table(table, table_file, row_group_size=ROW_GROUP_ROWS)
        meta_file = self._owner_only_temporary(entry, ".json")
        meta_file.write_text(json.dumps({**meta, "table_sha256": file_sha256(table_file)}))
        for temporary, suffix in ((table_file, ".parquet"), (meta_file, ".json")):
            os.chmod(temporary, 0o600)
            os.replace(temporary, self.folder / f"{entry}{suffix}")

    def _owner_only_temporary(self, entry: str, suffix: str) -> Path:
        """An empty owner-only file with a name of this write's own: the app and a verb (or two
        app windows) may parse the same file at once, and must not rename each other's
        half-written entry."""
        temporary = self.folder / f"{entry}{suffix}.{os.getpid()}.{uuid.uuid4().hex[:8]}.partial"
        os.close(os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600))
        return temporary


def events_to_entry(events: pd.DataFrame | None, counts: LocalTimeCounts, warnings: list[str],
                    rows_read: int) -> tuple[pa.Table, dict]:
    """A CSV/Parquet reader's result, its events sorted by learner then time (as
    sync.event_table.combine_events sorts them), as (table, sidecar)."""
    table = pa.Table.from_pandas(events, preserve_index=False) if events is not None else pa.table({})
    learners = {} if events is None else events["learner"].value_counts(sort=False)
    return table, {"counts": asdict(counts), "warnings": warnings, "rows_read": rows_read, "empty": events is None,
                   "learners": {str(learner): int(n) for learner, n in sorted(learners.items()) if n}}


def events_from_entry(table: pa.Table, meta: dict) -> tuple[pd.DataFrame | None, LocalTimeCounts, list[str], int]:
    events = None if meta["empty"] else table.to_pandas()
    return events, LocalTimeCounts(**meta["counts"]), list(meta["warnings"]), int(meta["rows_read"])


def part_to_entry(part: StatementPart) -> tuple[pa.Table, dict]:
    """An xAPI file's statements (before the cross-file rules) as (table, sidecar)."""
    meta = {"counts": asdict(part.counts), "warnings": part.warnings, "voided": sorted(part.voided),
            "home_pages": sorted(part.home_pages), "empty": part.table is None,
            **{name: getattr(part, name) for name in ("rows_read", "used_stored", "statements_seen", "anonymous")}}
    return (part.table if part.table is not None else pa.table({})), meta


def part_from_entry(source: str, table: pa.Table, meta: dict) -> StatementPart:
    return StatementPart(source=source, table=None if meta["empty"] else table, voided=set(meta["voided"]),
                         home_pages=set(meta["home_pages"]), counts=LocalTimeCounts(**meta["counts"]),
                         warnings=list(meta["warnings"]), rows_read=meta["rows_read"], used_stored=meta["used_stored"],
                         statements_seen=meta["statements_seen"], anonymous=meta["anonymous"])
