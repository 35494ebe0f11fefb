"""The observation store: one SQLite file per study or device, append-only.

Why SQLite in WAL mode with synchronous=FULL: a commit returns only after the
write-ahead log is on disk, so a code is durable before the screen says "saved",
and a second process (an import) can write beside the app without corrupting it.
Rows are never updated or deleted (triggers refuse it): a correction is a new code
row for the same observation and dimension, and the newest row wins.  Column
contracts of what the read side returns: observer_app/study/tables.py.
"""
from __future__ import annotations

import os
import sqlite3
import uuid
from collections.abc import Iterable, Mapping
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from observer_app.study import row_chain
from observer_app.study.tables import OBSERVATION_COLUMNS, OBSERVATION_TAIL_COLUMNS
from sync.errors import InputError

SCHEMA_VERSION = 7

# 2 -> 3: clock models become a history of kept decisions.  Each row says how it was
# made (method: "manual", "marks", "borrowed", "auto"), by which command, on what
# evidence (a one-line summary), which clock it is for (model_key: the device, or
# "device/session_id" when a device's sessions disagree), whether it ends the device's
# earlier decisions (replaces_earlier: `fieldmark align --refit DEVICE`) and whether a
# fit above the uncertainty bound was accepted by the user (uncertain_accepted).  at_ns
# is when it was fitted.  Rows from older stores read as their model JSON says
# (observer_app/pipeline/alignment.py: the precedence).
MIGRATION_CLOCK_HISTORY = """
    ALTER TABLE clock_models ADD COLUMN method TEXT NOT NULL DEFAULT '';
    ALTER TABLE clock_models ADD COLUMN command TEXT NOT NULL DEFAULT '';
    ALTER TABLE clock_models ADD COLUMN evidence TEXT NOT NULL DEFAULT '';
    ALTER TABLE clock_models ADD COLUMN model_key TEXT NOT NULL DEFAULT '';
    ALTER TABLE clock_models ADD COLUMN replaces_earlier INTEGER NOT NULL DEFAULT 0;
    ALTER TABLE clock_models ADD COLUMN uncertain_accepted INTEGER NOT NULL DEFAULT 0;
    CREATE INDEX clock_models_by_device ON clock_models (device, at_ns);
"""

# An adjudication names the observations it settles (ids joined by "|"), so re-pairing
# cannot orphan it; rows written before keep "" and are traced back through their unit id.
MIGRATION_ADJUDICATED_OBSERVATIONS = """
    ALTER TABLE adjudications ADD COLUMN observations TEXT NOT NULL DEFAULT '';
    """

# A paired run's signal start: the pairing id both devices share (typed from one to the
# other), what kind of sync mark a row is ("" for a mark on a learner's action; the
# start and end signals of a paired run), and the clock difference coders typed when
# they chose a typed wall-clock start instead of the signal (seconds, partner minus this
# device; NULL when none was typed).
MIGRATION_PAIRED_SIGNAL = """
    ALTER TABLE sessions ADD COLUMN pairing_id TEXT;
    ALTER TABLE sessions ADD COLUMN typed_clock_difference_s REAL;
    ALTER TABLE sync_marks ADD COLUMN pairing_id TEXT;
    ALTER TABLE sync_marks ADD COLUMN kind TEXT NOT NULL DEFAULT '';
    """

# 5 -> 6: replay plans (observer_app/coding/replay_plan.py): the rule, the digest of the clips it was
# cut from, and which coder codes which clip in which order.  Append-only like the rest.
REPLAY_PLANS_MIGRATION = """
    CREATE TABLE replay_plans (
        plan_id TEXT PRIMARY KEY, rule_json TEXT NOT NULL, description TEXT NOT NULL,
        clips_digest TEXT NOT NULL, created_ns INTEGER NOT NULL);
    CREATE TABLE replay_assignments (
        plan_id TEXT NOT NULL REFERENCES replay_plans, position INTEGER NOT NULL, clip TEXT NOT NULL,
        coder TEXT NOT NULL, double INTEGER NOT NULL, PRIMARY KEY (plan_id, clip, coder));
    """ + "".join(
    f"""
    CREATE TRIGGER {table}_no_update BEFORE UPDATE ON {table}
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER {table}_no_delete BEFORE DELETE ON {table}
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;"""
    for table in ("replay_plans", "replay_assignments"))

# The imports table guarded like the rest; the hash chain's table (observer_app/study/row_chain.py);
# code renames and merges as recorded decisions (fieldmark recode), applied when codes are read.
MIGRATION_BOUNDARY = """
    CREATE TRIGGER imports_no_update BEFORE UPDATE ON imports
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER imports_no_delete BEFORE DELETE ON imports
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TABLE row_chain (
        seq INTEGER PRIMARY KEY, table_name TEXT NOT NULL, row_id INTEGER NOT NULL,
        columns TEXT NOT NULL, link TEXT NOT NULL);
    CREATE TRIGGER row_chain_no_update BEFORE UPDATE ON row_chain
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER row_chain_no_delete BEFORE DELETE ON row_chain
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TABLE code_mappings (
        mapping_id TEXT PRIMARY KEY, dimension TEXT NOT NULL, old_code TEXT NOT NULL, new_code TEXT NOT NULL,
        at_ns INTEGER NOT NULL, reason TEXT NOT NULL DEFAULT '');
    CREATE TRIGGER code_mappings_no_update BEFORE UPDATE ON code_mappings
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER code_mappings_no_delete BEFORE DELETE ON code_mappings
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
"""

# Forward migrations: MIGRATIONS[n] takes a store from version n to n + 1.
MIGRATIONS: tuple[str, ...] = (
    """
    CREATE TABLE sessions (
        session_id TEXT PRIMARY KEY, coder TEXT NOT NULL, device TEXT NOT NULL,
        mode TEXT NOT NULL CHECK (mode IN ('live', 'replay')),
        paired_start_ns INTEGER, started_ns INTEGER NOT NULL, monotonic_start REAL NOT NULL,
        window_seconds REAL NOT NULL, schedule_order TEXT NOT NULL, seed INTEGER,
        scheme_hash TEXT NOT NULL, present TEXT NOT NULL DEFAULT '');
    CREATE TABLE session_ends (
        session_id TEXT PRIMARY KEY REFERENCES sessions, ended_ns INTEGER NOT NULL);
    CREATE TABLE observations (
        observation_id TEXT PRIMARY KEY, session_id TEXT NOT NULL REFERENCES sessions,
        learner TEXT NOT NULL, slot INTEGER, clip TEXT NOT NULL DEFAULT '',
        window_start_ns INTEGER NOT NULL, window_end_ns INTEGER NOT NULL,
        created_ns INTEGER NOT NULL, no_code INTEGER NOT NULL DEFAULT 0, scheme_hash TEXT NOT NULL);
    CREATE TABLE codes (
        code_id TEXT PRIMARY KEY, observation_id TEXT NOT NULL REFERENCES observations,
        dimension TEXT NOT NULL, code TEXT, entered_ns INTEGER NOT NULL, supersedes TEXT);
    CREATE INDEX codes_by_observation ON codes (observation_id, dimension);
    CREATE TABLE notes (
        note_id TEXT PRIMARY KEY, observation_id TEXT NOT NULL REFERENCES observations,
        text TEXT NOT NULL, entered_ns INTEGER NOT NULL);
    CREATE TABLE sync_marks (
        mark_id TEXT PRIMARY KEY, session_id TEXT NOT NULL REFERENCES sessions,
        learner TEXT NOT NULL DEFAULT '', marked_ns INTEGER NOT NULL, note TEXT NOT NULL DEFAULT '');
    CREATE TABLE absences (
        absence_id TEXT PRIMARY KEY, session_id TEXT NOT NULL REFERENCES sessions,
        learner TEXT NOT NULL, state TEXT NOT NULL CHECK (state IN ('absent', 'returned')),
        at_ns INTEGER NOT NULL);
    CREATE TABLE adjudications (
        adjudication_id TEXT PRIMARY KEY, unit TEXT NOT NULL, dimension TEXT NOT NULL,
        code TEXT NOT NULL, adjudicator TEXT NOT NULL, at_ns INTEGER NOT NULL,
        reason TEXT NOT NULL DEFAULT '');
    CREATE TABLE clock_models (
        model_id TEXT PRIMARY KEY, device TEXT NOT NULL, model_json TEXT NOT NULL, at_ns INTEGER NOT NULL);
    CREATE TABLE imports (
        content_hash TEXT PRIMARY KEY, source TEXT NOT NULL, at_ns INTEGER NOT NULL);
    """
    + "".join(
        f"""
    CREATE TRIGGER {table}_no_update BEFORE UPDATE ON {table}
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER {table}_no_delete BEFORE DELETE ON {table}
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;"""
        for table in ("sessions", "session_ends", "observations", "codes", "notes", "sync_marks",
                      "absences", "adjudications", "clock_models")
    ),
    # 1 -> 2: a solo window that the coder finished early records its real end.
    """
    CREATE TABLE window_closures (
        closure_id TEXT PRIMARY KEY, observation_id TEXT NOT NULL REFERENCES observations,
        window_end_ns INTEGER NOT NULL);
    CREATE TRIGGER window_closures_no_update BEFORE UPDATE ON window_closures
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    CREATE TRIGGER window_closures_no_delete BEFORE DELETE ON window_closures
        BEGIN SELECT RAISE(ABORT, 'fieldmark stores are append-only'); END;
    """,
    MIGRATION_CLOCK_HISTORY,
    MIGRATION_ADJUDICATED_OBSERVATIONS,
    MIGRATION_PAIRED_SIGNAL,
    # 5 -> 6: replay plans and their double-coding assignment.
    REPLAY_PLANS_MIGRATION,
    MIGRATION_BOUNDARY,
)
assert len(MIGRATIONS) == SCHEMA_VERSION
CHAIN_VERSION = MIGRATIONS.index(MIGRATION_BOUNDARY) + 1  # the version from which stores carry the hash chain
STORE_MODE = 0o600  # owner-only, like secret.key: the store holds who was observed doing what

_SESSION_COLUMNS = ("session_id, coder, device, mode, paired_start_ns, started_ns, monotonic_start, window_seconds, "
                    "schedule_order, seed, scheme_hash, present, pairing_id, typed_clock_difference_s")
# observation_id, session_id, learner, slot, clip, window_start_ns, window_end_ns, created_ns, no_code, scheme_hash;
# a repeated id is left alone (the first row of a window wins; a repeated import adds nothing)
_INSERT_OBSERVATION = "INSERT OR IGNORE INTO observations VALUES (?,?,?,?,?,?,?,?,?,?)"
SIGNAL_START, SIGNAL_END = "signal start", "signal end"
MARK_KINDS: tuple[str, ...] = ("", SIGNAL_START, SIGNAL_END)
# Where slot 0 of a paired run began on the device's clock: the typed shared start, or
# the coder's key press on the start signal (its first mark; nothing while it is awaited).
# (one grouped pass over the marks, joined per session, rather than a lookup per row)
_PAIRED_START_NS = "COALESCE(s.paired_start_ns, signal.signal_ns)"
_SIGNAL_JOIN = ("LEFT JOIN (SELECT session_id, min(marked_ns) AS signal_ns FROM sync_marks "
                f"WHERE kind = '{SIGNAL_START}' GROUP BY session_id) signal USING (session_id) ")

APPEND_ONLY_TABLES: tuple[str, ...] = (
    "sessions", "session_ends", "observations", "codes", "notes", "sync_marks", "absences",
    "adjudications", "clock_models", "imports", "window_closures", "replay_plans", "replay_assignments",
    "row_chain", "code_mappings",
)


def to_ns(moment: datetime | pd.Timestamp) -> int:
    """A tz-aware moment -> UTC nanoseconds.  Naive datetimes are refused: we never guess a zone."""
    stamp = pd.Timestamp(moment)
    if stamp.tzinfo is None:
        raise ValueError("naive datetime given to the store; attach a time zone")
    return int(stamp.value)


def _nullable_ns(values: pd.Series) -> list[int | None]:
    """A datetime column -> UTC nanoseconds as Python ints (None for NaT), whole column at once."""
    stamps = pd.to_datetime(values, utc=True).dt.as_unit("ns")
    numbers = stamps.to_numpy(dtype="datetime64[ns]").view("int64").tolist()
    if stamps.isna().any():
        numbers = [None if missing else n for n, missing in zip(numbers, stamps.isna())]
    return numbers


def _optional(frame: pd.DataFrame, column: str) -> list:
    """A column that older callers may leave out -> Python values, None for missing."""
    if column not in frame:
        return [None] * len(frame)
    return [None if pd.isna(value) else value for value in frame[column]]


def _times(values: pd.Series) -> pd.Series:
    return pd.to_datetime(values.astype("Int64"), unit="ns", utc=True)


def new_id() -> str:
    return str(uuid.uuid4())


class Store:
    """An open observation store.  Every ``record_*`` call is one durable transaction."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        if not self.path.exists():
            # SQLite gives the -wal and -shm files the database file's permissions.
            try:
                os.close(os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, STORE_MODE))
            except FileExistsError:
                pass  # another process created it a moment ago
            except OSError as error:
                raise InputError(self.path, None, f"cannot create the store ({error.strerror})") from None
        try:
            self._connection = sqlite3.connect(self.path, timeout=30.0, isolation_level=None)
            row_chain.register(self._connection)
            self._connection.execute("PRAGMA busy_timeout = 30000")
            self._connection.execute("PRAGMA journal_mode = WAL")
            self._connection.execute("PRAGMA synchronous = FULL")
            self._connection.execute("PRAGMA foreign_keys = ON")
            # REPLACE deletes the conflicting row; with recursive triggers that delete fires the
            # append-only guard, so INSERT OR REPLACE is refused instead of overwriting a row.
            self._connection.execute("PRAGMA recursive_triggers = ON")
            self._migrate()
        except sqlite3.DatabaseError as error:
            raise InputError(self.path, None, f"cannot be opened as an observation store ({error}); restore it "
                             "from a backup or a device's copy") from None

    # -- lifecycle --------------------------------------------------------------
    def close(self) -> None:
        self.checkpoint()
        self._connection.close()

    def checkpoint(self) -> None:
        """Move the write-ahead log into the store file, so a copy of the file alone holds every code."""
        self._connection.execute("PRAGMA wal_checkpoint(TRUNCATE)")

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def schema_version(self) -> int:
        return int(self._connection.execute("PRAGMA user_version").fetchone()[0])

    def _migrate(self) -> None:
        with self._transaction() as cursor:
            version = int(cursor.execute("PRAGMA user_version").fetchone()[0])
            if version > SCHEMA_VERSION:
                raise InputError(self.path, None, f"was written by a newer fieldmark (schema {version}); "
                                 "upgrade fieldmark")
            for step in range(version, SCHEMA_VERSION):
                for statement in _statements(MIGRATIONS[step]):
                    cursor.execute(statement)
                cursor.execute(f"PRAGMA user_version = {step + 1}")
            row_chain.ensure_chain(cursor, adopt_existing_rows=version < CHAIN_VERSION)

    def _transaction(self):
        return _Transaction(self._connection)

    def integrity_check(self) -> str:
        return str(self._connection.execute("PRAGMA integrity_check").fetchone()[0])

    # -- write side -------------------------------------------------------------
    def start_session(
        self, *, coder: str, device: str, mode: str, started_at: datetime, monotonic_start: float,
        window_seconds: float, order: str, seed: int | None, scheme_hash: str,
        paired_start: datetime | None = None, present: Iterable[str] = (), session_id: str | None = None,
        pairing_id: str | None = None, typed_clock_difference_s: float | None = None,
    ) -> str:
        """One session row.  ``pairing_id``: the code both devices of a paired run share;
        ``typed_clock_difference_s``: the clock difference the coders typed (partner minus
        this device) when they started on a typed wall-clock time."""
        session_id = session_id or new_id()
        with self._transaction() as cursor:
            cursor.execute(
                f"INSERT INTO sessions ({_SESSION_COLUMNS}) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (session_id, coder, device, mode, None if paired_start is None else to_ns(paired_start),
                 to_ns(started_at), float(monotonic_start), float(window_seconds), order, seed,
                 scheme_hash, "\n".join(present), pairing_id,
                 None if typed_clock_difference_s is None else float(typed_clock_difference_s)),
            )
        return session_id

    def end_session(self, session_id: str, ended_at: datetime) -> None:
        with self._transaction() as cursor:
            cursor.execute("INSERT OR IGNORE INTO session_ends VALUES (?,?)", (session_id, to_ns(ended_at)))
        self.checkpoint()

    def record_code(
        self, *, observation_id: str, session_id: str, learner: str, window_start: datetime,
        window_end: datetime, dimension: str, code: str | None, entered_at: datetime, scheme_hash: str,
        slot: int | None = None, clip: str = "", supersedes: str | None = None, code_id: str | None = None,
    ) -> str:
        """Store one code (``None`` retracts the dimension's current code); durable on return.

        The observation row is created with the first code of its window.
        """
        code_id = code_id or new_id()
        with self._transaction() as cursor:
            cursor.execute(_INSERT_OBSERVATION, (observation_id, session_id, learner, slot, clip, to_ns(window_start),
                                                 to_ns(window_end), to_ns(entered_at), 0, scheme_hash))
            cursor.execute("INSERT INTO codes VALUES (?,?,?,?,?,?)",
                           (code_id, observation_id, dimension, code, to_ns(entered_at), supersedes))
        return code_id

    def record_no_code(
        self, *, session_id: str, learner: str, window_start: datetime, window_end: datetime,
        scheme_hash: str, slot: int | None = None, clip: str = "", observation_id: str | None = None,
    ) -> str:
        """A window that ended with nothing coded: an explicit row, so gaps stay visible."""
        observation_id = observation_id or new_id()
        with self._transaction() as cursor:
            cursor.execute(_INSERT_OBSERVATION, (observation_id, session_id, learner, slot, clip, to_ns(window_start),
                                                 to_ns(window_end), to_ns(window_end), 1, scheme_hash))
        return observation_id

    def record_observation(
        self, *, session_id: str, learner: str, window_start: datetime, window_end: datetime,
        coded_at: datetime, codes: Mapping[str, str | None], scheme_hash: str, slot: int | None = None,
        clip: str = "", note: str = "", observation_id: str | None = None,
    ) -> str:
        """A whole coded window in one transaction (imports, generated demo data)."""
        observation_id = observation_id or new_id()
        with self._transaction() as cursor:
            self._insert_observation(cursor, observation_id, session_id, learner, window_start, window_end,
                                     coded_at, codes, scheme_hash, slot, clip, note)
        return observation_id

    def _insert_observation(self, cursor, observation_id, session_id, learner, window_start, window_end,
                            coded_at, codes, scheme_hash, slot, clip, note) -> None:
        coded_ns = to_ns(coded_at)
        given = {d: c for d, c in codes.items() if c is not None and c == c and c != ""}
        cursor.execute(_INSERT_OBSERVATION, (observation_id, session_id, learner, slot, clip, to_ns(window_start),
                                             to_ns(window_end), coded_ns, 0 if given else 1, scheme_hash))
        if cursor.rowcount == 0:
            return
        for dimension, code in given.items():
            cursor.execute("INSERT INTO codes VALUES (?,?,?,?,?,NULL)",
                           (f"{observation_id}:{dimension}", observation_id, dimension, code, coded_ns))
        if note:
            cursor.execute("INSERT INTO notes VALUES (?,?,?,?)", (f"{observation_id}:note", observation_id, note, coded_ns))

    def record_observations(self, sessions: pd.DataFrame, observations: pd.DataFrame, dimensions: Iterable[str]) -> int:
        """Many observations in one transaction; returns how many were new.

        ``sessions`` has the SESSIONS columns, ``observations`` the OBSERVATIONS columns
        (observer_app/study/tables.py); ``sessions`` may be empty when they were started
        already.  Rows whose ids exist already are left alone, so a
        repeated import adds nothing.  Columns are converted whole, not row by row.
        """
        dimensions = list(dimensions)
        session_rows = [] if sessions.empty else zip(
            sessions["session_id"], sessions["coder"], sessions["device"], sessions["mode"],
            _nullable_ns(sessions["paired_start"]), _nullable_ns(sessions["started_at"]),
            sessions["monotonic_start"].astype(float), sessions["window_seconds"].astype(float), sessions["order"],
            [None if pd.isna(seed) else int(seed) for seed in sessions["seed"]], sessions["scheme_hash"],
            [""] * len(sessions), _optional(sessions, "pairing_id"), _optional(sessions, "typed_clock_difference_s"),
        )
        given = observations[dimensions].notna() & observations[dimensions].ne("") if dimensions else None
        coded_ns = _nullable_ns(observations["coded_at"])
        slots = [None if pd.isna(slot) else int(slot) for slot in observations.get("slot", pd.Series(pd.NA, index=observations.index))]
        clips = observations["clip"].fillna("") if "clip" in observations else [""] * len(observations)
        no_code = (~given.any(axis=1)).astype(int) if given is not None else [1] * len(observations)
        observation_rows = zip(
            observations["observation_id"], observations["session_id"], observations["learner"], slots, clips,
            _nullable_ns(observations["window_start"]), _nullable_ns(observations["window_end"]), coded_ns,
            no_code, observations["scheme_hash"],
        )
        code_rows = [
            (f"{observation_id}:{dimension}", observation_id, dimension, code, entered)
            for dimension in dimensions
            for observation_id, code, entered, ok in zip(observations["observation_id"], observations[dimension],
                                                         coded_ns, given[dimension])
            if ok
        ]
        notes = observations["note"].fillna("") if "note" in observations else pd.Series("", index=observations.index)
        note_rows = [(f"{o}:note", o, text, entered)
                     for o, text, entered in zip(observations["observation_id"], notes, coded_ns) if text]
        with self._transaction() as cursor:
            cursor.executemany(f"INSERT OR IGNORE INTO sessions ({_SESSION_COLUMNS}) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                               session_rows)
            cursor.executemany(_INSERT_OBSERVATION, observation_rows)
            added = max(cursor.rowcount, 0)  # direct inserts only (total_changes would count the chain's rows too)
            cursor.executemany("INSERT OR IGNORE INTO codes VALUES (?,?,?,?,?,NULL)", code_rows)
            cursor.executemany("INSERT OR IGNORE INTO notes VALUES (?,?,?,?)", note_rows)
        return added

    def record_window_end(self, observation_id: str, window_end: datetime) -> str:
        """The window really ended here (solo mode: every dimension coded before time ran out)."""
        closure_id = new_id()
        with self._transaction() as cursor:
            cursor.execute("INSERT INTO window_closures VALUES (?,?,?)", (closure_id, observation_id, to_ns(window_end)))
        return closure_id

    def record_note(self, observation_id: str, text: str, entered_at: datetime) -> str:
        note_id = new_id()
        with self._transaction() as cursor:
            cursor.execute("INSERT INTO notes VALUES (?,?,?,?)", (note_id, observation_id, text, to_ns(entered_at)))
        return note_id

    def record_sync_mark(self, *, session_id: str, marked_at: datetime, learner: str = "", note: str = "",
                         mark_id: str | None = None, pairing_id: str | None = None, kind: str = "") -> str:
        """A sync mark: ``kind`` "" for a mark on a learner's action (matched to the log),
        or a paired run's SIGNAL_START / SIGNAL_END (matched to the partner's mark of the
        same ``pairing_id`` and kind)."""
        if kind not in MARK_KINDS:
            raise ValueError(f"sync mark kind must be one of {MARK_KINDS}, got {kind!r}")
        mark_id = mark_id or new_id()
        with self._transaction() as cursor:
            cursor.execute("INSERT OR IGNORE INTO sync_marks (mark_id, session_id, learner, marked_ns, note, "
                           "pairing_id, kind) VALUES (?,?,?,?,?,?,?)",
                           (mark_id, session_id, learner, to_ns(marked_at), note, pairing_id, kind))
        return mark_id

    def record_absence(self, *, session_id: str, learner: str, state: str, at: datetime) -> str:
        absence_id = new_id()
        with self._transaction() as cursor:
            cursor.execute("INSERT INTO absences VALUES (?,?,?,?,?)", (absence_id, session_id, learner, state, to_ns(at)))
        return absence_id

    def record_adjudication(self, *, unit: str, observations: Iterable[str], dimension: str, code: str,
                            adjudicator: str, at: datetime, reason: str = "") -> str:
        """``observations``: the ids of the observations the decision settles (what it is keyed by)."""
        adjudication_id = new_id()
        settled = "|".join(sorted(str(observation) for observation in observations))
        if not settled:
            raise ValueError("an adjudication must name the observations it settles")
        with self._transaction() as cursor:
            cursor.execute("INSERT INTO adjudications (adjudication_id, unit, dimension, code, adjudicator, at_ns, "
                           "reason, observations) VALUES (?,?,?,?,?,?,?,?)",
                           (adjudication_id, unit, dimension, code, adjudicator, to_ns(at), reason, settled))
        return adjudication_id

    def record_clock_model(self, device: str, model_json: str, at: datetime, *, method: str = "",
                           command: str = "", evidence: str = "", model_key: str = "",
                           replaces_earlier: bool = False, uncertain_accepted: bool = False) -> str:
        """Append one clock decision to the history (``at``: when it was fitted)."""
        return self.record_clock_models([dict(device=device, model_json=model_json, method=method, command=command,
                                              evidence=evidence, model_key=model_key or device,
                                              replaces_earlier=replaces_earlier,
                                              uncertain_accepted=uncertain_accepted)], at)[0]

    def record_clock_models(self, rows: list[dict], at: datetime) -> list[str]:
        """Several clock decisions in one transaction (all or none), each a dict with the
        keys of :meth:`record_clock_model`."""
        ids = [new_id() for _ in rows]
        with self._transaction() as cursor:
            cursor.executemany(
                "INSERT INTO clock_models (model_id, device, model_json, at_ns, method, command, evidence, model_key, "
                "replaces_earlier, uncertain_accepted) VALUES (?,?,?,?,?,?,?,?,?,?)",
                [(model_id, row["device"], row["model_json"], to_ns(at), row.get("method", ""), row.get("command", ""),
                  row.get("evidence", ""), row.get("model_key") or row["device"], int(bool(row.get("replaces_earlier"))),
                  int(bool(row.get("uncertain_accepted")))) for model_id, row in zip(ids, rows)])
        return ids

    def record_code_mapping(self, *, dimension: str, old_code: str, new_code: str, at: datetime,
                            reason: str = "") -> str:
        """From now on every stored ``old_code`` of ``dimension`` reads as ``new_code`` (a rename or a merge)."""
        mapping_id = new_id()
        with self._transaction() as cursor:
            cursor.execute("INSERT INTO code_mappings VALUES (?,?,?,?,?,?)",
                           (mapping_id, dimension, old_code, new_code, to_ns(at), reason))
        return mapping_id

    def code_mappings(self) -> pd.DataFrame:
        """Every recorded rename or merge, oldest first: dimension, old_code, new_code, at, reason."""
        frame = self._frame("SELECT dimension, old_code, new_code, at_ns, reason FROM code_mappings ORDER BY rowid")
        frame["at"] = _times(frame.pop("at_ns"))
        return frame

    def apply_code_mappings(self, frame: pd.DataFrame) -> pd.DataFrame:
        """``frame`` (dimension, code columns) with the recorded mappings applied in the order they were made."""
        for dimension, old, new in self._connection.execute(
                "SELECT dimension, old_code, new_code FROM code_mappings ORDER BY rowid"):
            frame.loc[(frame["dimension"] == dimension) & (frame["code"] == old), "code"] = new
        return frame

    def record_import(self, content_hash: str, source: str, at: datetime) -> None:
        with self._transaction() as cursor:
            cursor.execute("INSERT OR IGNORE INTO imports VALUES (?,?,?)", (content_hash, source, to_ns(at)))

    def record_replay_plan(self, *, plan_id: str, rule_json: str, description: str, clips_digest: str,
                           created_at: datetime, assignment: pd.DataFrame) -> bool:
        """Store a plan and its ASSIGNMENT rows (position, clip, coder, double); False if it was stored already."""
        with self._transaction() as cursor:
            cursor.execute("INSERT OR IGNORE INTO replay_plans VALUES (?,?,?,?,?)",
                           (plan_id, rule_json, description, clips_digest, to_ns(created_at)))
            if cursor.rowcount == 0:
                return False
            cursor.executemany(
                "INSERT INTO replay_assignments VALUES (?,?,?,?,?)",
                zip([plan_id] * len(assignment), assignment["position"].astype(int).tolist(),
                    assignment["clip"].astype(str).tolist(), assignment["coder"].astype(str).tolist(),
                    assignment["double"].astype(int).tolist()))
        return True

    def replay_plan(self, plan_id: str) -> tuple[dict, pd.DataFrame] | None:
        """A stored plan (plan_id, rule_json, description, clips_digest) and its assignment rows, or None."""
        plan = self._frame("SELECT plan_id, rule_json, description, clips_digest FROM replay_plans WHERE plan_id = ?",
                           (plan_id,))
        if plan.empty:
            return None
        rows = self._frame("SELECT position, clip, coder, double FROM replay_assignments WHERE plan_id = ? "
                           "ORDER BY position, coder", (plan_id,))
        rows["double"] = rows["double"].astype(bool)
        return plan.iloc[0].to_dict(), rows

    def replay_plans(self) -> pd.DataFrame:
        """Every stored plan: plan_id, rule_json, description, clips_digest, created_at."""
        frame = self._frame("SELECT plan_id, rule_json, description, clips_digest, created_ns FROM replay_plans "
                            "ORDER BY rowid")
        frame["created_at"] = _times(frame.pop("created_ns"))
        return frame

    def append_rows(self, rows: Mapping[str, pd.DataFrame]) -> dict[str, int]:
        """Rows of other stores, table by table in one transaction: new ids added, known ids left alone.

        Columns are named (never positional), rows keep their order (so corrections still
        follow what they correct).  A row whose id the store holds with other content is
        a conflict: nothing is written and ``RowConflict`` names it.
        """
        counts: dict[str, int] = {}
        with self._transaction() as cursor:
            for table, frame in rows.items():
                if frame.empty:
                    continue
                columns = list(frame.columns)
                primary = sorted((row[5], row[1]) for row in cursor.execute(f'PRAGMA table_info("{table}")') if row[5])
                keys = [columns.index(name) for _, name in primary] or [0]
                records = list(frame.astype(object).where(frame.notna(), None).itertuples(index=False, name=None))
                stored = {}
                for start in range(0, len(records), 500):
                    firsts = sorted({record[keys[0]] for record in records[start:start + 500]}, key=str)
                    marks = ",".join("?" * len(firsts))
                    stored.update({tuple(row[i] for i in keys): row for row in cursor.execute(
                        f'SELECT {", ".join(columns)} FROM "{table}" WHERE "{columns[keys[0]]}" IN ({marks})', firsts)})
                for record in records:
                    key = tuple(record[i] for i in keys)
                    if key in stored and tuple(stored[key]) != tuple(record):
                        raise RowConflict(table, "/".join(map(str, key)))
                cursor.executemany(f'INSERT OR IGNORE INTO "{table}" ({", ".join(columns)}) '
                                   f'VALUES ({",".join("?" * len(columns))})', records)
                counts[table] = max(cursor.rowcount, 0)
        return counts

    # -- read side --------------------------------------------------------------
    def _frame(self, query: str, params: tuple = ()) -> pd.DataFrame:
        cursor = self._connection.execute(query, params)
        columns = [c[0] for c in cursor.description]
        return pd.DataFrame.from_records(cursor.fetchall(), columns=columns)

    def sessions(self) -> pd.DataFrame:
        frame = self._frame(
            f"SELECT s.session_id, s.coder, s.device, s.mode, {_PAIRED_START_NS} AS paired_start_ns, s.started_ns, "
            "s.monotonic_start, "
            "s.window_seconds, s.schedule_order AS \"order\", s.seed, s.scheme_hash, s.present, e.ended_ns, "
            "s.pairing_id, s.typed_clock_difference_s "
            f"FROM sessions s LEFT JOIN session_ends e USING (session_id) {_SIGNAL_JOIN}"
            "ORDER BY s.started_ns, s.rowid")
        frame["paired_start"] = _times(frame.pop("paired_start_ns"))
        frame["started_at"] = _times(frame.pop("started_ns"))
        frame["ended_at"] = _times(frame.pop("ended_ns"))
        frame["seed"] = frame["seed"].astype("Int64")
        frame["monotonic_start"] = frame["monotonic_start"].astype("float64")
        frame["window_seconds"] = frame["window_seconds"].astype("float64")
        frame["typed_clock_difference_s"] = frame["typed_clock_difference_s"].astype("float64")
        for column in ("session_id", "coder", "device", "mode", "order", "scheme_hash", "present", "pairing_id"):
            frame[column] = frame[column].astype("string")
        return frame[["session_id", "coder", "device", "mode", "paired_start", "started_at", "monotonic_start",
                      "window_seconds", "order", "seed", "scheme_hash", "present", "ended_at", "pairing_id",
                      "typed_clock_difference_s"]]

    def observations(self, dimensions: Iterable[str] | None = None) -> pd.DataFrame:
        """The current view: newest code per (observation, dimension), retractions applied.

        ``dimensions`` fixes which dimension columns appear (and their order); by default
        every dimension that has ever been coded, sorted.
        """
        base = self._frame(
            f"SELECT o.observation_id, o.session_id, s.coder, s.device, s.mode, {_PAIRED_START_NS} AS paired_start_ns, "
            "s.pairing_id, o.learner, "
            "o.slot, o.clip, o.window_start_ns, COALESCE(w.window_end_ns, o.window_end_ns) AS window_end_ns, "
            "o.created_ns, o.no_code, o.scheme_hash "
            f"FROM observations o JOIN sessions s USING (session_id) {_SIGNAL_JOIN}"
            "LEFT JOIN (SELECT observation_id, window_end_ns FROM window_closures WHERE rowid IN "
            "(SELECT max(rowid) FROM window_closures GROUP BY observation_id)) w USING (observation_id) "
            "ORDER BY o.window_start_ns, o.rowid")
        codes = self._frame(
            "SELECT c.observation_id, c.dimension, c.code, c.entered_ns, "
            "(SELECT count(*) FROM codes d WHERE d.observation_id = c.observation_id AND d.dimension = c.dimension) AS versions "
            "FROM codes c WHERE c.rowid IN (SELECT max(rowid) FROM codes GROUP BY observation_id, dimension)")
        codes = self.apply_code_mappings(codes)
        notes = self._frame(
            "SELECT observation_id, text AS note FROM notes WHERE rowid IN (SELECT max(rowid) FROM notes GROUP BY observation_id)")
        if dimensions is None:
            dimensions = sorted(codes["dimension"].unique()) if len(codes) else []
        dimensions = list(dimensions)
        wide = codes.pivot(index="observation_id", columns="dimension", values="code") if len(codes) else pd.DataFrame()
        frame = base.set_index("observation_id")
        for dimension in dimensions:
            frame[dimension] = wide[dimension].reindex(frame.index) if dimension in wide else None
            frame[dimension] = frame[dimension].astype("string")
        last_code = codes.groupby("observation_id")["entered_ns"].max() if len(codes) else pd.Series(dtype="int64")
        corrected = codes.groupby("observation_id")["versions"].max().gt(1) if len(codes) else pd.Series(dtype=bool)
        frame["coded_at"] = _times(last_code.reindex(frame.index).fillna(frame["created_ns"]))
        frame["corrected"] = corrected.reindex(frame.index, fill_value=False).astype(bool)
        frame["note"] = notes.set_index("observation_id")["note"].reindex(frame.index).fillna("").astype("string") \
            if len(notes) else pd.Series("", index=frame.index, dtype="string")
        frame = frame.reset_index()
        frame["paired_start"] = _times(frame.pop("paired_start_ns"))
        frame["window_start"] = _times(frame.pop("window_start_ns"))
        frame["window_end"] = _times(frame.pop("window_end_ns"))
        frame["slot"] = frame["slot"].astype("Int64")
        for column in ("observation_id", "session_id", "coder", "device", "mode", "pairing_id", "learner", "clip",
                       "scheme_hash"):
            frame[column] = frame[column].astype("string")
        coded_any = frame[dimensions].notna().any(axis=1) if dimensions else pd.Series(False, index=frame.index)
        frame["no_code"] = ~coded_any.to_numpy(dtype=bool)
        return frame[list(OBSERVATION_COLUMNS) + dimensions + list(OBSERVATION_TAIL_COLUMNS)].reset_index(drop=True)

    def sync_marks(self) -> pd.DataFrame:
        frame = self._frame(
            "SELECT m.mark_id, m.session_id, s.device, s.coder, m.learner, m.marked_ns, m.note, m.pairing_id, m.kind "
            "FROM sync_marks m JOIN sessions s USING (session_id) ORDER BY m.marked_ns, m.rowid")
        frame["marked_at"] = _times(frame.pop("marked_ns"))
        for column in ("mark_id", "session_id", "device", "coder", "learner", "note", "pairing_id", "kind"):
            frame[column] = frame[column].astype("string")
        return frame[["mark_id", "session_id", "device", "coder", "learner", "marked_at", "note", "pairing_id", "kind"]]

    def absences(self) -> pd.DataFrame:
        frame = self._frame("SELECT session_id, learner, state, at_ns FROM absences ORDER BY at_ns, rowid")
        frame["at"] = _times(frame.pop("at_ns"))
        for column in ("session_id", "learner", "state"):
            frame[column] = frame[column].astype("string")
        return frame

    def adjudications(self) -> pd.DataFrame:
        frame = self._frame(
            "SELECT adjudication_id, unit, observations, dimension, code, adjudicator, at_ns, reason "
            "FROM adjudications ORDER BY at_ns, rowid")
        frame = self.apply_code_mappings(frame)
        frame["at"] = _times(frame.pop("at_ns"))
        for column in ("adjudication_id", "unit", "observations", "dimension", "code", "adjudicator", "reason"):
            frame[column] = frame[column].astype("string")
        return frame[["adjudication_id", "unit", "observations", "dimension", "code", "adjudicator", "at", "reason"]]

    def clock_models(self) -> pd.DataFrame:
        """The whole clock-model history, one row per decision ever stored, by fitted time:
        model_id, device, model_key, method, command, evidence, replaces_earlier,
        uncertain_accepted, model_json, at (observer_app/study/tables.py: CLOCK HISTORY).
        Which row each clock uses is the precedence's decision (pipeline/alignment.py)."""
        frame = self._frame(
            "SELECT model_id, device, model_key, method, command, evidence, replaces_earlier, uncertain_accepted, "
            "model_json, at_ns FROM clock_models ORDER BY at_ns, rowid")
        frame["at"] = _times(frame.pop("at_ns"))
        frame["model_key"] = frame["model_key"].where(frame["model_key"] != "", frame["device"])
        for column in ("model_id", "device", "model_key", "method", "command", "evidence"):
            frame[column] = frame[column].astype("string")
        for column in ("replaces_earlier", "uncertain_accepted"):
            frame[column] = frame[column].astype(bool)
        return frame

    def codes_log(self) -> pd.DataFrame:
        """Every code row ever written, oldest first, as written (the audit trail; renames not applied)."""
        frame = self._frame("SELECT code_id, observation_id, dimension, code, entered_ns, supersedes FROM codes ORDER BY rowid")
        frame["entered_at"] = _times(frame.pop("entered_ns"))
        return frame


class RowConflict(Exception):
    """Another store holds a row with an id this store has, but different content."""

    def __init__(self, table: str, row_id: str) -> None:
        self.table, self.row_id = table, row_id
        super().__init__(f"{table} row {row_id} differs from the row with the same id already stored")


def _statements(script: str) -> list[str]:
    """Split a migration script into statements, keeping trigger bodies whole."""
    statements, buffer = [], []
    for line in script.splitlines():
        buffer.append(line)
        joined = "\n".join(buffer)
        if sqlite3.complete_statement(joined):
            if joined.strip():
                statements.append(joined)
            buffer = []
    return statements


class _Transaction:
    """BEGIN IMMEDIATE ... COMMIT: one writer at a time across processes, all or nothing."""

    def __init__(self, connection: sqlite3.Connection) -> None:
        self._connection = connection

    def __enter__(self) -> sqlite3.Cursor:
        self._cursor = self._connection.cursor()
        self._cursor.execute("BEGIN IMMEDIATE")
        return self._cursor

    def __exit__(self, kind, value, traceback) -> None:
        if kind is None:
            self._cursor.execute("COMMIT")
        else:
            self._cursor.execute("ROLLBACK")


def now_utc() -> datetime:
    return datetime.now(timezone.utc)
