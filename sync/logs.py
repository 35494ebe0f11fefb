"""All of a study's logs -> one EVENTS table and a report of what reading decided."""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from sync.csv_reader import read_csv_log
from sync.errors import InputError
from sync.event_table import combine_events
from sync.local_time import LocalTimeCounts
from sync.log_cache import LogCache, events_from_entry, events_to_entry, part_from_entry, part_to_entry
from sync.log_spec import LogSpec
from sync.parquet_reader import hive_partition_values, read_parquet_log
from sync.sorted_parquet import LearnerBlocks
from sync.xapi_reader import read_xapi_log, resolve_statements

READERS = {"csv": read_csv_log, "parquet": read_parquet_log}
FILE_THREADS = 2


@dataclass
class ReadReport:
    """What reading the logs found: rows kept per file (and rows read, before the filter to
    the observed learners), DST decisions, learners not in the roster, and each file's
    SHA-256 (hex) when the cache hashed it."""

    rows_per_file: dict[str, int] = field(default_factory=dict)
    rows_read_per_file: dict[str, int] = field(default_factory=dict)
    ambiguous_local_times: int = 0
    nonexistent_local_times: int = 0
    unknown_learners: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    digests: dict[str, str] = field(default_factory=dict)

    @property
    def rows(self) -> int:
        return sum(self.rows_per_file.values())

    @property
    def rows_read(self) -> int:
        return sum(self.rows_read_per_file.values())


def read_logs(specs: Iterable[LogSpec], known_log_ids: Iterable[str] | None = None,
              only_log_ids: Iterable[str] | None = None, cache_dir: Path | None = None,
              digests: Mapping[str, str] | None = None) -> tuple[pd.DataFrame, ReadReport]:
    """Read every file of every spec into one EVENTS table (sync/tables.py).

    ``known_log_ids`` (the roster's log_id column) lets the report name learners the
    roster does not know, with their event counts; they are kept, not fatal.
    ``only_log_ids`` keeps just those learners' events, filtered while reading (each
    learner's whole log is kept, so history figures are unchanged); the report counts
    rows read and rows kept.  ``cache_dir`` keeps each parsed file there (sync/log_cache.py),
    keyed by its digest, so an unchanged file is not parsed again (``digests``: files this
    run already hashed, path -> SHA-256 hex).  Raises ``InputError`` for a missing file or
    any malformed input.
    """
    listed = _log_files(specs)
    report = ReadReport(digests=dict(digests or {}))
    counts = LocalTimeCounts()
    only = None if only_log_ids is None else frozenset(map(str, only_log_ids))
    parts, statement_parts = [], []
    cache = LogCache(cache_dir) if cache_dir is not None else None
    for spec, files in listed:
        if spec.format == "xapi":
            for path in files:
                part = _through_cache(cache, spec, path, only, lambda: read_xapi_log(spec, path, only),
                                      part_to_entry, lambda table, meta: part_from_entry(str(path), table, meta),
                                      report.digests)
                statement_parts.append(part)
                counts = counts + part.counts
                report.rows_read_per_file[str(path)] = part.rows_read
                report.warnings.extend(part.warnings)
            continue

        def read_one(path: Path, spec: LogSpec = spec):
            return _through_cache(cache, spec, path, only, lambda: _in_log_order(READERS[spec.format](spec, path, only)),
                                  lambda result: events_to_entry(*result), events_from_entry, report.digests)

        # Files of a folder (a partitioned dataset) two at a time: Arrow reads without
        # Python's lock, so one file's parsing overlaps the other's reading.
        with ThreadPoolExecutor(max_workers=FILE_THREADS) as pool:
            for path, (events, file_counts, warnings, rows_read) in zip(files, pool.map(read_one, files)):
                if events is not None:
                    parts.append(events)
                counts = counts + file_counts
                report.rows_per_file[str(path)] = 0 if events is None else len(events)
                report.rows_read_per_file[str(path)] = rows_read
                report.warnings.extend(warnings)
    if statement_parts:
        statements, warnings = resolve_statements(statement_parts)
        report.warnings.extend(warnings)
        kept = statements["source"].value_counts(sort=False) if statements is not None else {}
        for part in statement_parts:
            report.rows_per_file[part.source] = int(kept.get(part.source, 0))
        if statements is not None:
            parts.append(statements)
    _no_copies(report, listed)
    events = combine_events(parts)
    _finish_report(report, counts, known_log_ids, lambda: events["learner"].value_counts(sort=False).items())
    return events, report


def cached_learner_blocks(specs: Iterable[LogSpec], known_log_ids: Iterable[str] | None,
                          only_log_ids: Iterable[str] | None, cache_dir: Path,
                          digests: Mapping[str, str] | None = None) -> tuple[LearnerBlocks | None, ReadReport]:
    """The logs as blocks of whole learners read from their cache entries (sorted by learner,
    then time; files that share learners merged), with the report ``read_logs`` would give,
    when every file is CSV or Parquet and has an entry for these settings and filter.
    Otherwise (None, a report holding only the digests, to pass on).  Nothing is parsed and
    no entry is loaded whole.  ``digests`` as for ``read_logs``.  Raises ``InputError`` for
    a missing file.
    """
    listed = _log_files(specs)
    report, found = ReadReport(digests=dict(digests or {})), []
    only = None if only_log_ids is None else frozenset(map(str, only_log_ids))
    cache = LogCache(cache_dir)
    streamable = all(spec.format != "xapi" for spec, _ in listed)  # else no entry is looked up (nor verified)
    for spec, files in listed:
        for path in files:
            prefix, entry, report.digests[str(path)] = cache.key(spec, path, only, report.digests.get(str(path)))
            found.append((path, cache.find(entry) if streamable else None))
    if any(entry is None for _, entry in found):
        return None, ReadReport(digests=report.digests)
    learners: dict[str, int] = {}
    counts = LocalTimeCounts()
    tables, shared = [], False
    for path, (table_path, meta) in found:
        file_learners = meta["learners"]
        shared = shared or bool(learners.keys() & file_learners.keys())
        for learner, rows in file_learners.items():
            learners[learner] = learners.get(learner, 0) + rows
        rows = sum(file_learners.values())
        if rows:
            tables.append(table_path)
        counts = counts + LocalTimeCounts(**meta["counts"])
        report.rows_per_file[str(path)] = rows
        report.rows_read_per_file[str(path)] = int(meta["rows_read"])
        report.warnings.extend(meta["warnings"])
    _no_copies(report, listed)
    _finish_report(report, counts, known_log_ids, lambda: learners.items())
    return LearnerBlocks(paths=tuple(tables), rows=report.rows, learners=frozenset(learners), shared=shared), report


def fill_log_cache(specs: Iterable[LogSpec], only_log_ids: Iterable[str] | None, cache_dir: Path,
                   digests: dict[str, str]) -> bool:
    """Parse every CSV or Parquet file that has no cache entry for this filter and store it,
    two files at a time, keeping none in memory after its entry is written, so that
    ``cached_learner_blocks`` then finds them all (a first export streams too).  False,
    parsing nothing, when a log is xAPI (its statements are resolved across files and read
    whole).  ``digests``: files already hashed (path -> SHA-256 hex), updated.  Raises
    ``InputError`` for a missing file or any malformed input, as ``read_logs`` does.
    """
    specs = list(specs)
    if any(spec.format == "xapi" for spec in specs):
        return False
    only = None if only_log_ids is None else frozenset(map(str, only_log_ids))
    cache = LogCache(cache_dir)
    missing = []
    for spec, files in _log_files(specs):
        for path in files:
            prefix, entry, digests[str(path)] = cache.key(spec, path, only, digests.get(str(path)))
            if cache.find(entry) is None:
                missing.append((spec, path, prefix, entry))

    def store(job: tuple[LogSpec, Path, str, str]) -> None:
        spec, path, prefix, entry = job
        cache.store(prefix, entry, *events_to_entry(*_in_log_order(READERS[spec.format](spec, path, only))))

    with ThreadPoolExecutor(max_workers=FILE_THREADS) as pool:
        list(pool.map(store, missing))
    return True


def _log_files(specs: Iterable[LogSpec]) -> list[tuple[LogSpec, list[Path]]]:
    """Each spec with its files, listed once; InputError when one file is read by two [[logs]]
    entries (a folder and a file in it, an entry pasted twice): every event of it would count
    twice."""
    listed = [(spec, _files(spec)) for spec in specs]
    seen: dict[Path, int] = {}
    for number, (spec, files) in enumerate(listed, 1):
        for path in files:
            where = path.resolve()
            if where in seen:
                raise InputError(path, None, f"is read by [[logs]] entries #{seen[where]} and #{number} of study.toml; "
                                 "every event in it would count twice -- remove it from one of them")
            seen[where] = number
    return listed


def _no_copies(report: ReadReport, listed: list[tuple[LogSpec, list[Path]]]) -> None:
    """InputError when two CSV or Parquet files with rows hold the same bytes (a download saved
    twice, a day exported twice): every event would count twice.  The same bytes under other
    mapped partition folders (``learner=n-1/`` and ``learner=n-2/``) are other events; xAPI
    copies are not refused either: a statement id seen twice already counts once.  Needs the
    digests, so only reads through the cache (every command's) are checked."""
    first: dict[tuple, Path] = {}
    for spec, files in listed:
        if spec.format == "xapi":
            continue
        for path in files:
            digest = report.digests.get(str(path))
            if digest is None or not report.rows_per_file.get(str(path)):
                continue
            mapped = {key: value for key, value in hive_partition_values(spec, path).items()
                      if key in spec.columns.values()}
            key = (digest, tuple(sorted(mapped.items())))
            if key in first:
                raise InputError(path, None, f"holds exactly the same bytes as {first[key]} (SHA-256 "
                                 f"{digest[:12]}...); every event would count twice -- remove the copy from the logs")
            first[key] = path


def _files(spec: LogSpec) -> list[Path]:
    """The spec's files; InputError when its path is missing or holds none."""
    if not spec.path.exists():
        raise InputError(spec.path, None, "does not exist; fix the path of its [[logs]] entry in study.toml")
    files = spec.files()
    if not files:
        raise InputError(spec.path, None, f"is a folder with no {spec.format} files")
    return files


def _in_log_order(result: tuple[pd.DataFrame | None, LocalTimeCounts, list[str], int]):
    """A reader's result with its events sorted as EVENTS is (what the cache keeps)."""
    events, *rest = result
    return (None if events is None else combine_events([events]), *rest)


def _finish_report(report: ReadReport, counts: LocalTimeCounts, known_log_ids: Iterable[str] | None,
                   per_learner) -> None:
    """The DST counts and their warning; learners the roster does not know (``per_learner()``:
    (learner, events) pairs), with their warning."""
    report.ambiguous_local_times = counts.ambiguous
    report.nonexistent_local_times = counts.nonexistent
    if counts.ambiguous or counts.nonexistent:
        report.warnings.append(
            f"{counts.ambiguous} local times fell in a repeated hour (read as the first occurrence) and "
            f"{counts.nonexistent} in a skipped hour (moved forward by the gap)")
    if known_log_ids is not None:
        known = set(map(str, known_log_ids))
        unknown = {str(learner): int(n) for learner, n in per_learner() if n and str(learner) not in known}
        report.unknown_learners = dict(sorted(unknown.items()))
        if unknown:
            shown = ", ".join(list(report.unknown_learners)[:5])
            report.warnings.append(f"{len(unknown)} learners in the logs are not in the roster's log_id column "
                                   f"(e.g. {shown}); their events are kept but no observation will use them")


def _through_cache(cache: LogCache | None, spec: LogSpec, path: Path, only: frozenset[str] | None,
                   read, to_entry, from_entry, digests: dict[str, str]):
    """``read()``'s result for one file, from the cache when its digest and settings match;
    the file's digest goes into ``digests``."""
    if cache is None:
        return read()
    prefix, entry, digests[str(path)] = cache.key(spec, path, only, digests.get(str(path)))
    found = cache.load(entry)
    if found is not None:
        return from_entry(*found)
    result = read()
    cache.store(prefix, entry, *to_entry(result))
    return result
