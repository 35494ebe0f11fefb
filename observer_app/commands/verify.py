"""``fieldmark verify STUDY``: is the store as fieldmark wrote it?  Names the first break of the hash chain.

The store refuses updates, deletes and REPLACE from any tool (triggers); this verb is the
evidence for what triggers cannot stop, a person editing the file (observer_app/study/row_chain.py).
"""
from __future__ import annotations

import argparse
import json
import sqlite3
import sys

from observer_app.commands.arguments import json_option, study_argument
from observer_app.study.folder import STORE_FILE
from observer_app.study.foreign_store import reference_triggers
from observer_app.study.row_chain import verify_chain
from observer_app.study.store import SCHEMA_VERSION
from sync.errors import InputError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "verify", help="check the observation store against its hash chain",
        description="Recompute the hash chain over every stored row; exit 0 when the store is as fieldmark wrote "
                    "it, else exit 2 naming the first row that was changed, removed or slipped in.")
    study_argument(parser, "the study folder (or a device's observations.sqlite)")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    path = args.study / STORE_FILE if args.study.is_dir() else args.study
    if not path.is_file():
        raise InputError(path, None, "no observation store here; pass a study folder or an observations.sqlite")
    try:
        connection = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            if connection.execute("PRAGMA integrity_check").fetchone()[0] != "ok":
                raise InputError(path, None, "SQLite's integrity check fails; restore the store from a backup")
            if not connection.execute("SELECT 1 FROM sqlite_master WHERE name = 'row_chain'").fetchone():
                raise InputError(path, None, "has no hash chain yet; open it once with this fieldmark version "
                                 "(any verb that reads the study) and verify again")
            version = int(connection.execute("PRAGMA user_version").fetchone()[0])
            if version > SCHEMA_VERSION:
                raise InputError(path, None, f"was written by a newer fieldmark (schema {version}); upgrade fieldmark")
            rows, first_break = verify_chain(connection, reference_triggers(version))
        finally:
            connection.close()
    except sqlite3.DatabaseError as error:
        raise InputError(path, None, f"cannot be read as a store ({error})") from None
    if first_break is not None:
        where = f"table {first_break.table}" + (f", rowid {first_break.row_id}" if first_break.row_id is not None else "")
        raise InputError(path, where, f"{first_break.message} (after {rows} intact rows); restore the store from "
                         "a backup or a device's copy")
    if args.json:
        sys.stdout.write(json.dumps({"store": str(path), "rows": rows, "intact": True}) + "\n")
    else:
        print(f"{path}: intact, {rows} rows in the hash chain")
    return 0
