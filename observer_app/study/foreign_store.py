"""Another device's store, read without trusting it: what may come into the study.

Why so careful: the file comes from another machine and may be damaged, from another
version, or edited.  So it is copied to a private temporary folder (with its -wal file,
which holds the newest codes) and the copy is opened read-only, ``trusted_schema`` off,
under a time limit.  Its schema is compared with what fieldmark writes at its version
before any row is read: a view or an unknown trigger refuses the file (a recursive view
would hang the first query that touched it).  Columns are read by name, never
``SELECT *``; every row is validated as a CSV row would be (known learner, known code,
window end after start and at most an hour, times in range), and a row whose id the
study already holds with other content is refused.  Clock models are never imported:
a device's clock is fitted in the study, from the study's logs.
"""
from __future__ import annotations

import shutil
import sqlite3
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from observer_app.study import row_chain
from observer_app.study.folder import Study
from observer_app.study.store import CHAIN_VERSION, MIGRATIONS, SCHEMA_VERSION, _statements
from sync.errors import InputError
from sync.plausible_values import FIRST_NS, LAST_NS, LONGEST_WINDOW_SECONDS, RANGE_TEXT

TIME_LIMIT_SECONDS = 60.0
PROGRESS_STEPS = 10_000  # SQLite instructions between two looks at the clock
# Tables whose rows come into the study, in an order that keeps references valid.
IMPORTED_TABLES: tuple[str, ...] = ("sessions", "session_ends", "observations", "codes", "notes", "sync_marks",
                                    "absences", "window_closures", "replay_plans", "replay_assignments",
                                    "adjudications")
NEVER_IMPORTED: tuple[str, ...] = ("clock_models", "imports", row_chain.CHAIN_TABLE)
# Integer time columns per table (UTC ns); each must be an integer in the plausible range.
TIME_COLUMNS: dict[str, tuple[str, ...]] = {
    "sessions": ("started_ns",), "session_ends": ("ended_ns",),
    "observations": ("window_start_ns", "window_end_ns", "created_ns"), "codes": ("entered_ns",),
    "notes": ("entered_ns",), "sync_marks": ("marked_ns",), "absences": ("at_ns",),
    "window_closures": ("window_end_ns",), "adjudications": ("at_ns",), "replay_plans": ("created_ns",),
}
SECOND = 1_000_000_000


@dataclass
class ForeignRows:
    """Validated rows per table (columns by name, foreign rowid order) and what was left out."""

    rows: dict[str, pd.DataFrame] = field(default_factory=dict)
    left_out: dict[str, int] = field(default_factory=dict)


def reference_schema(version: int) -> dict[str, tuple[str, ...]]:
    """table -> column names that fieldmark writes at ``version`` (built in memory from MIGRATIONS)."""
    reference = sqlite3.connect(":memory:")
    try:
        for step in range(version):
            for statement in _statements(MIGRATIONS[step]):
                reference.execute(statement)
        tables = [row[0] for row in reference.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        return {table: tuple(row[1] for row in reference.execute(f'PRAGMA table_info("{table}")')) for table in tables}
    finally:
        reference.close()


def reference_triggers(version: int) -> dict[str, str]:
    """trigger name -> SQL of the guards fieldmark's migrations create at ``version``."""
    reference = sqlite3.connect(":memory:")
    try:
        for step in range(version):
            for statement in _statements(MIGRATIONS[step]):
                reference.execute(statement)
        return {row[0]: row[1] for row in reference.execute("SELECT name, sql FROM sqlite_master WHERE type = 'trigger'")}
    finally:
        reference.close()


def read_foreign_store(path: Path, study: Study | None) -> ForeignRows:
    """Every importable row of the store at ``path``, validated against ``study`` (when given); InputError otherwise."""
    with tempfile.TemporaryDirectory(prefix="fieldmark-import-") as folder:
        copy = Path(folder) / "foreign.sqlite"
        try:
            shutil.copyfile(path, copy)
            if Path(f"{path}-wal").is_file():
                shutil.copyfile(f"{path}-wal", f"{copy}-wal")
        except OSError as error:
            raise InputError(path, None, f"cannot be copied for reading ({error.strerror})") from None
        try:
            connection = sqlite3.connect(f"file:{copy}?mode=ro", uri=True)
        except sqlite3.Error as error:
            raise InputError(path, None, f"cannot be opened ({error}); copy the file again from the device") from None
        deadline = time.monotonic() + TIME_LIMIT_SECONDS
        connection.set_progress_handler(lambda: int(time.monotonic() > deadline), PROGRESS_STEPS)
        try:
            connection.execute("PRAGMA trusted_schema = OFF")
            return _read(connection, path, study)
        except sqlite3.OperationalError as error:
            if "interrupted" in str(error):
                raise InputError(path, None, f"reading took longer than {TIME_LIMIT_SECONDS:.0f} s; the file is not "
                                 "an ordinary fieldmark store") from None
            raise InputError(path, None, f"cannot read the store ({error}); copy the file again from the device") from None
        except sqlite3.DatabaseError as error:
            raise InputError(path, None, f"cannot read the store ({error}); copy the file again from the device") from None
        finally:
            connection.close()


def _read(connection: sqlite3.Connection, path: Path, study: Study | None) -> ForeignRows:
    version = connection.execute("PRAGMA user_version").fetchone()[0]
    if version == 0:
        raise InputError(path, None, "not a fieldmark observation store")
    if version > SCHEMA_VERSION:
        raise InputError(path, None, f"written by a newer fieldmark (schema {version}); upgrade fieldmark first")
    schema = connection.execute("SELECT type, name, sql FROM sqlite_master").fetchall()
    expected_tables = reference_schema(version)
    expected_triggers = reference_triggers(version)
    present_tables = {name for kind, name, _ in schema if kind == "table"}
    for kind, name, sql in schema:
        if kind == "view":
            raise InputError(path, f"view {name}", "a fieldmark store has no views; this file was edited "
                             "outside fieldmark and is not imported")
        if kind == "trigger" and expected_triggers.get(name) != sql and not _is_chain_trigger(connection, name, sql,
                                                                                               version):
            raise InputError(path, f"trigger {name}", "not a trigger fieldmark writes; this file was edited "
                             "outside fieldmark and is not imported")
    for table, columns in expected_tables.items():
        if table not in present_tables:
            raise InputError(path, f"table {table}", "missing; this is not a complete fieldmark store")
        have = {row[1] for row in connection.execute(f'PRAGMA table_info("{table}")')}
        missing = [column for column in columns if column not in have]
        if missing:
            raise InputError(path, f"table {table}", f"has no column {missing[0]!r}; not a fieldmark store")
    result = ForeignRows()
    for table in NEVER_IMPORTED:
        if table in expected_tables:
            count = connection.execute(f'SELECT count(*) FROM "{table}"').fetchone()[0]
            if count and table == "clock_models":
                result.left_out[table] = int(count)
    for table in IMPORTED_TABLES:
        if table not in expected_tables:
            continue  # an older store lacks newer tables
        columns = expected_tables[table]
        cursor = connection.execute(f'SELECT {", ".join(columns)} FROM "{table}" ORDER BY rowid')
        result.rows[table] = pd.DataFrame.from_records(cursor.fetchall(), columns=list(columns))
    if study is not None:
        for table, frame in result.rows.items():
            _check_times(frame, table, path)
        _check_rows(result.rows, path, study)
    return result


def _is_chain_trigger(connection: sqlite3.Connection, name: str, sql: str, version: int) -> bool:
    if version < CHAIN_VERSION or not name.endswith("_chain"):
        return False
    table = name[: -len("_chain")]
    columns = [row[1] for row in connection.execute(f'PRAGMA table_info("{table}")')]
    return bool(columns) and sql == row_chain._trigger_sql(table, columns)


def _check_times(frame: pd.DataFrame, table: str, path: Path) -> None:
    for column in TIME_COLUMNS.get(table, ()):
        values = frame[column]
        integer = (pd.Series(True, index=values.index) if pd.api.types.is_integer_dtype(values.dtype)
                   else values.map(lambda v: isinstance(v, (int, np.integer)) and not isinstance(v, bool)))
        numbers = pd.to_numeric(values.where(integer), errors="coerce")
        bad = ~integer | (numbers < FIRST_NS) | (numbers >= LAST_NS)
        if bad.any():
            row = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(path, f"table {table}, row {row + 1}, {column}",
                             f"{_plain(values.iloc[row])!r} is not a time {RANGE_TEXT}; the file is damaged or edited")


def _plain(value: object) -> object:
    return int(value) if isinstance(value, np.integer) else value


def _check_rows(rows: dict[str, pd.DataFrame], path: Path, study: Study) -> None:
    """Every row as a CSV row would be checked: learners, codes, windows, adjudications."""
    def refuse(table: str, mask: pd.Series, message: str) -> None:
        if mask.any():
            row = int(np.flatnonzero(mask.to_numpy())[0])
            raise InputError(path, f"table {table}, row {row + 1}", message.format(row=rows[table].iloc[row]))

    learners = set(study.roster["learner"].dropna().astype(str))
    observations = rows["observations"]
    refuse("observations", ~observations["learner"].isin(learners),
           "learner {row[learner]!r} is not in roster.csv; add them to the roster first")
    length = observations["window_end_ns"] - observations["window_start_ns"]
    refuse("observations", length <= 0, "window ends before it starts; the file is damaged or edited")
    refuse("observations", length > LONGEST_WINDOW_SECONDS * SECOND,
           f"window is longer than {LONGEST_WINDOW_SECONDS:.0f} s; the file is damaged or edited")
    refuse("observations", ~observations["session_id"].isin(rows["sessions"]["session_id"]),
           "session {row[session_id]!r} is not in the file; the file is damaged")
    codes = rows["codes"]
    refuse("codes", ~codes["observation_id"].isin(observations["observation_id"]),
           "observation {row[observation_id]!r} is not in the file; the file is damaged")
    allowed = {dimension.name: set(dimension.code_names) for dimension in study.scheme.dimensions}
    refuse("codes", ~codes["dimension"].isin(allowed), "dimension {row[dimension]!r} is not in scheme.toml")
    known = codes.apply(lambda r: r["code"] is None or r["code"] in allowed.get(r["dimension"], ()), axis=1) \
        if len(codes) else pd.Series(dtype=bool)
    if (~known.astype(bool)).any():
        row = codes[~known.astype(bool)].iloc[0]
        codes_of = study.scheme.dimension(row["dimension"]).code_names
        refuse("codes", ~known.astype(bool), "code {row[code]!r} is not a code of dimension {row[dimension]!r} in "
               f"scheme.toml (its codes: {', '.join(codes_of)})")
    if "absences" in rows:
        refuse("absences", ~rows["absences"]["learner"].isin(learners), "learner {row[learner]!r} is not in roster.csv")
    if "adjudications" in rows:
        decisions = rows["adjudications"]
        refuse("adjudications", ~decisions["dimension"].isin(allowed), "dimension {row[dimension]!r} is not in scheme.toml")
        known = decisions.apply(lambda r: r["code"] in allowed.get(r["dimension"], ()), axis=1) \
            if len(decisions) else pd.Series(dtype=bool)
        refuse("adjudications", ~known.astype(bool), "code {row[code]!r} is not a code of {row[dimension]!r} in scheme.toml")
        now_ns = time.time_ns()
        refuse("adjudications", decisions["at_ns"] > now_ns, "decided in the future; the device's clock or the file "
               "is wrong")
