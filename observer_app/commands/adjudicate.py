"""``fieldmark adjudicate STUDY FILE.csv``: record a lead's decisions on disagreements.

The CSV has columns unit, dimension, code, adjudicator, reason; units are the ids
``fieldmark agree STUDY --disagreements OUT.csv`` lists.  Every row is checked against
the scheme and the study's units before any is stored, so a bad file stores nothing.
Each record is keyed by the observations its unit holds (observer_app.pipeline.units), so
it stays attached to them whatever later re-pairing does.  Records are appended; the
newest per unit and dimension wins.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import pandas as pd

from observer_app.commands.arguments import json_option, study_argument
from agreement.disagreements import read_adjudications
from observer_app.pipeline.units import load_study_units
from observer_app.study.store import Store
from sync.errors import InputError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "adjudicate", help="record adjudicated codes for disagreeing units",
        description="Append adjudications (unit, dimension, code, adjudicator, reason) to the study.")
    study_argument(parser)
    parser.add_argument("file", type=Path, help="CSV with columns unit, dimension, code, adjudicator, reason")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    if not args.study.is_dir():
        raise InputError(args.study, None, "not a study folder")
    found = load_study_units(args.study)
    decisions = read_adjudications(args.file, found.dimensions, set(found.units["unit"].astype(str)))
    settles = found.units.groupby("unit")["observation_id"].agg(list)
    at = pd.Timestamp.now(tz="UTC").to_pydatetime()
    with Store(found.store_path) as store:
        for row in decisions.itertuples(index=False):
            store.record_adjudication(unit=row.unit, observations=settles[row.unit], dimension=row.dimension,
                                      code=row.code, adjudicator=row.adjudicator, at=at, reason=row.reason)
    if args.json:
        sys.stdout.write(json.dumps({"study": str(args.study), "recorded": len(decisions)}) + "\n")
    else:
        sys.stdout.write(f"Recorded {len(decisions)} adjudications in {args.study}\n")
    return 0
