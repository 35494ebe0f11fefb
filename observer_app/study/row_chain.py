"""Tamper evidence for the store: a hash chain over every row, and its check.

Threat model: fieldmark protects the store against accidents and tools -- its own verbs
and a SQLite shell's UPDATE, DELETE or INSERT OR REPLACE are refused by triggers (with
``recursive_triggers`` on every fieldmark connection, REPLACE's hidden delete fires the
delete guard).  It cannot stop a person who edits the file on purpose (drops a trigger,
rewrites a page); for that the chain gives evidence: every row inserted gets a link
``sha256(previous link, table, rowid, columns, the row's values)`` in ``row_chain``,
written by an AFTER INSERT trigger in the same transaction.  ``verify_chain`` recomputes
the chain and names the first row that was changed, removed, replaced or slipped in
around it.  The trigger calls ``fieldmark_link``, a function only fieldmark connections
define, so a plain SQLite shell cannot even insert a row by accident.
"""
from __future__ import annotations

import hashlib
import sqlite3
from dataclasses import dataclass

CHAIN_TABLE = "row_chain"
LINK_FUNCTION = "fieldmark_link"


def link(previous: str | None, table: str, row_id: int, columns: str, values: str) -> str:
    """One link of the chain (hex SHA-256); ``values`` is the row as SQLite's quote() of each column."""
    text = "\x1f".join((previous or "", table, str(row_id), columns, values))
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()


def register(connection: sqlite3.Connection) -> None:
    """Define the link function on a connection (every fieldmark connection to a store)."""
    connection.create_function(LINK_FUNCTION, 5, link, deterministic=True)


def chained_tables(connection: sqlite3.Connection) -> list[str]:
    """Every table of the store but the chain itself (each is append-only)."""
    return [row[0] for row in connection.execute(
        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' AND name != ? ORDER BY name",
        (CHAIN_TABLE,))]


def _columns(connection: sqlite3.Connection, table: str) -> list[str]:
    return [row[1] for row in connection.execute(f'PRAGMA table_info("{table}")')]


def _values_expression(columns: list[str], prefix: str = "") -> str:
    return " || ',' || ".join(f'quote({prefix}"{column}")' for column in columns)


def _trigger_sql(table: str, columns: list[str]) -> str:
    names = ",".join(columns)
    return (f'CREATE TRIGGER "{table}_chain" AFTER INSERT ON "{table}" BEGIN '
            f"INSERT INTO {CHAIN_TABLE} (table_name, row_id, columns, link) VALUES ('{table}', NEW.rowid, '{names}', "
            f"{LINK_FUNCTION}((SELECT link FROM {CHAIN_TABLE} ORDER BY seq DESC LIMIT 1), '{table}', NEW.rowid, "
            f"'{names}', {_values_expression(columns, 'NEW.')})); END")


def ensure_chain(cursor: sqlite3.Cursor, *, adopt_existing_rows: bool) -> None:
    """Create (or, after a migration added columns, recreate) each table's chain trigger.

    ``adopt_existing_rows``: the chain was just created by a migration, so rows written
    before it existed are chained now, in rowid order.  Never otherwise: a row that is
    missing from the chain later is evidence, not something to adopt.
    """
    existing = {row[0]: row[1] for row in cursor.execute("SELECT name, sql FROM sqlite_master WHERE type = 'trigger'")}
    for table in chained_tables(cursor.connection):
        columns = _columns(cursor.connection, table)
        wanted = _trigger_sql(table, columns)
        if existing.get(f"{table}_chain") != wanted:
            if f"{table}_chain" in existing:
                cursor.execute(f'DROP TRIGGER "{table}_chain"')
            cursor.execute(wanted)
        if adopt_existing_rows:
            names = ",".join(columns)
            rows = cursor.execute(f'SELECT rowid, {_values_expression(columns)} FROM "{table}" ORDER BY rowid').fetchall()
            for row_id, values in rows:
                previous = cursor.execute(f"SELECT link FROM {CHAIN_TABLE} ORDER BY seq DESC LIMIT 1").fetchone()
                cursor.execute(f"INSERT INTO {CHAIN_TABLE} (table_name, row_id, columns, link) VALUES (?,?,?,?)",
                               (table, row_id, names, link(previous[0] if previous else None, table, row_id,
                                                           names, values)))


@dataclass(frozen=True)
class ChainBreak:
    """The first place where the store differs from what was written."""

    table: str
    row_id: int | None
    message: str


def verify_chain(connection: sqlite3.Connection, guards: dict[str, str]) -> tuple[int, ChainBreak | None]:
    """(rows checked, the first break or None).  Read-only.

    ``guards``: trigger name -> SQL of the append-only triggers fieldmark's migrations
    create at the store's version; each must be there unchanged, as must every table's
    chain trigger.
    """
    triggers = {row[0]: row[1] for row in connection.execute("SELECT name, sql FROM sqlite_master WHERE type = 'trigger'")}
    tables = chained_tables(connection)
    expected = {**guards, **{f"{table}_chain": _trigger_sql(table, _columns(connection, table)) for table in tables}}
    for name, sql in expected.items():
        if triggers.get(name) != sql:
            table = next((t for t in tables + [CHAIN_TABLE] if name.startswith(t + "_")), name)
            return 0, ChainBreak(table, None, f"its guard trigger {name} was removed or changed; the store was "
                                              "edited outside fieldmark")
    entries = connection.execute(f"SELECT seq, table_name, row_id, columns, link FROM {CHAIN_TABLE} ORDER BY seq").fetchall()
    values: dict[tuple[str, str], dict[int, str]] = {}
    for table, columns in {(entry[1], entry[3]) for entry in entries}:
        if table not in tables:
            return 0, ChainBreak(table, None, "the table is gone; the store was edited outside fieldmark")
        names = columns.split(",")
        present = set(_columns(connection, table))
        if not set(names) <= present:
            return 0, ChainBreak(table, None, "a column is gone; the store was edited outside fieldmark")
        values[(table, columns)] = dict(connection.execute(
            f'SELECT rowid, {_values_expression(names)} FROM "{table}"').fetchall())
    previous = None
    chained: dict[str, set[int]] = {table: set() for table in tables}
    for checked, (_, table, row_id, columns, stored) in enumerate(entries):
        row = values[(table, columns)].get(row_id)
        if row is None:
            return checked, ChainBreak(table, row_id, "this row was deleted or replaced after it was written")
        if link(previous, table, row_id, columns, row) != stored:
            return checked, ChainBreak(table, row_id, "this row (or its link in row_chain) was changed after it "
                                                      "was written")
        chained[table].add(row_id)
        previous = stored
    for table in tables:
        stray = sorted({row[0] for row in connection.execute(f'SELECT rowid FROM "{table}"')} - chained[table])
        if stray:
            return len(entries), ChainBreak(table, stray[0], "this row is not in the chain: it was inserted around "
                                                             "fieldmark")
    return len(entries), None
