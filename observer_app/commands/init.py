"""``fieldmark init DIR``: a new study folder with commented templates."""
from __future__ import annotations

import argparse
from pathlib import Path

from observer_app.study.folder import load_study
from observer_app.study.creation import create_study


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser("init", help="create a new study folder with commented templates",
                                   description="Create a study folder: study.toml, scheme.toml, roster.csv, "
                                               "an empty observation store and the pseudonym key.")
    parser.add_argument("dir", type=Path, help="new or empty folder")
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    written = create_study(args.dir)
    load_study(args.dir)  # the templates must always load; this proves it on every init
    print(f"created study in {args.dir}")
    for path in written:
        print(f"  {path.name}")
    print("next: edit the templates, then `fieldmark app` to code or `fieldmark import` to add observations")
    return 0
