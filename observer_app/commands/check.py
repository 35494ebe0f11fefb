"""``fieldmark check WINDOWS``: grouped cross-validated detector check of exported windows."""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from export.reader import read_manifest
from observer_app.pipeline.coverage import coverage_lines
from sync.errors import InputError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "check", help="grouped cross-validated detector check of exported windows",
        description="Fit a plain detector per dimension with folds of whole learners and report "
                    "Cohen's kappa and AUC beside majority and stratified baselines.",
    )
    parser.add_argument("windows", type=Path, metavar="WINDOWS", help="file written by fieldmark export")
    parser.add_argument("--dimension", action="append", metavar="D", help="check only this dimension (repeatable)")
    parser.add_argument("--folds", type=int, help="folds of learners (default 5, fewer when there are fewer learners)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the fold assignment (default %(default)s)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    if args.folds is not None and args.folds < 2:
        raise InputError(None, "--folds", "needs at least 2 folds")
    if not 0 <= args.seed < 2**32:
        raise InputError(None, "--seed", f"must be a whole number from 0 to {2**32 - 1}")
    manifest = read_manifest(args.windows)
    labels = manifest["label_columns"]
    for dimension in args.dimension or []:
        if dimension not in labels:
            raise InputError(args.windows, dimension, f"no such dimension; the file has {', '.join(labels)}")
    from export.detector_check import DEFAULT_FOLDS, check_windows  # scikit-learn loads only when the check runs

    results = check_windows(args.windows, args.dimension, args.folds or DEFAULT_FOLDS, args.seed)
    if args.json:
        payload = {"windows": str(args.windows), "coverage": manifest.get("coverage"),
                   "dimensions": {result.dimension: result.as_dict() for result in results}}
        sys.stdout.write(json.dumps(payload) + "\n")
        return 0
    if manifest.get("coverage"):  # files from before the manifest recorded coverage have none
        print(coverage_lines(manifest["coverage"])[0])
    print(f"{'dimension':<16}{'rows':>7}{'learners':>10}{'kappa':>8}{'AUC':>7}   baseline kappa/AUC (majority, stratified)")
    for result in results:
        print(
            f"{result.dimension:<16}{result.rows:>7}{result.learners:>10}{_figure(result.model.kappa):>8}"
            f"{_figure(result.model.auc):>7}   {_figure(result.majority_baseline.kappa)}/{_figure(result.majority_baseline.auc)}, "
            f"{_figure(result.stratified_baseline.kappa)}/{_figure(result.stratified_baseline.auc)}"
        )
    return 0


def _figure(value: float | None) -> str:
    return "-" if value is None else f"{value:.2f}"
