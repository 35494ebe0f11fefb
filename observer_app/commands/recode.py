"""``fieldmark recode STUDY DIMENSION OLD NEW``: record that a coded code was renamed or merged.

Editing scheme.toml cannot rename a code that was already coded (every verb refuses,
observer_app/study/scheme_binding.py): a rename or merge changes what stored rows mean,
so it is a decision a person records, with who decided and why.  The stored rows stay as
coded (the audit trail); every read applies the recorded mappings in order.
"""
from __future__ import annotations

import argparse
import json
import sys

from observer_app.commands.arguments import json_option, study_argument
from observer_app.study.folder import SCHEME_FILE, load_study
from observer_app.study.store import Store, now_utc
from sync.errors import InputError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "recode", help="record that a coded code was renamed or merged into another",
        description="Every stored OLD code of DIMENSION reads as NEW from now on. NEW must be in scheme.toml "
                    "and OLD no longer (edit scheme.toml first). Recorded in the store with --reason; never undone.")
    study_argument(parser)
    parser.add_argument("dimension", help="the dimension, as in scheme.toml")
    parser.add_argument("old", help="the code as it was coded")
    parser.add_argument("new", help="the code it now is (a code of scheme.toml)")
    parser.add_argument("--reason", default="", help="why (kept with the decision)")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    study = load_study(args.study)
    scheme_file = study.dir / SCHEME_FILE
    if args.dimension not in study.scheme.dimension_names:
        raise InputError(scheme_file, args.dimension, f"no such dimension; the scheme has "
                         f"{', '.join(study.scheme.dimension_names)}")
    codes = study.scheme.dimension(args.dimension).code_names
    if args.new not in codes:
        raise InputError(scheme_file, f"dimension {args.dimension}", f"{args.new!r} is not one of its codes; add it "
                         "to scheme.toml first")
    if args.old in codes:
        raise InputError(scheme_file, f"dimension {args.dimension}", f"{args.old!r} is still one of its codes; remove "
                         "it from scheme.toml first, so nobody codes it again")
    with Store(study.store_path) as store:
        trail = store.codes_log()
        current = trail.drop_duplicates(["observation_id", "dimension"], keep="last")
        used = store.apply_code_mappings(current.loc[current["code"].notna(), ["dimension", "code"]].copy())
        count = int(((used["dimension"] == args.dimension) & (used["code"] == args.old)).sum())
        decided = store.adjudications()
        count += int(((decided["dimension"] == args.dimension) & (decided["code"] == args.old)).sum())
        if count == 0:
            raise InputError(study.store_path, f"dimension {args.dimension}", f"{args.old!r} was never coded; there is "
                             "nothing to rename")
        store.record_code_mapping(dimension=args.dimension, old_code=args.old, new_code=args.new, at=now_utc(),
                                  reason=args.reason)
    if args.json:
        sys.stdout.write(json.dumps({"study": str(study.dir), "dimension": args.dimension, "old": args.old,
                                     "new": args.new, "rows": count}) + "\n")
    else:
        print(f"{count} {args.dimension} codes {args.old!r} now read as {args.new!r} (recorded in the store)")
    return 0
