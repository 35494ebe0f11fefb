"""``fieldmark import STUDY FILE...``: observations from other devices (SQLite) or CSV."""
from __future__ import annotations

import argparse
import json
from pathlib import Path

from observer_app.commands.arguments import json_option, study_argument
from observer_app.study.importing import import_file
from observer_app.study.scheme_binding import check_scheme_binding
from observer_app.study.store import Store
from observer_app.study.folder import load_study


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "import", help="add observations from another device's store or a CSV",
        description="Import observations. A CSV needs columns coder, learner, time (ISO 8601 with offset) and one "
                    "column per dimension; optional device, note, end, clip. Importing the same rows twice adds nothing.")
    study_argument(parser)
    parser.add_argument("files", type=Path, nargs="+", metavar="FILE", help="observations.sqlite or .csv")
    parser.add_argument("--skip-bad", action="store_true", help="import the good rows of a CSV and report the bad ones")
    parser.add_argument("--offsets-as-written", action="store_true",
                        help="take CSV times at UTC offsets the study's time zone did not have then (a coder whose "
                             "clock really kept another zone); refused by default as the sign of an hour-off mistake")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    study = load_study(args.study)
    report = []
    with Store(study.store_path) as store:
        check_scheme_binding(study, store)
        for path in args.files:
            result = import_file(study, store, path, skip_bad=args.skip_bad,
                                 offsets_as_written=args.offsets_as_written)
            report.append({"file": str(path), "added": result.added, "skipped": result.skipped})
    if args.json:
        print(json.dumps({"imports": report}))
        return 0
    for entry in report:
        added = ", ".join(f"{count} {table}" for table, count in entry["added"].items()) or "nothing new"
        print(f"{entry['file']}: added {added}")
        for line in entry["skipped"]:
            print(f"  skipped {line}")
    return 0
