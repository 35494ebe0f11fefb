"""``fieldmark check WINDOWS``: grouped, nested cross-validated detector check and its audit by group."""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from observer_app.commands.arguments import json_option
from export.reader import read_manifest
from observer_app.pipeline.coverage import coverage_lines
from observer_app.study.output_paths import publish_text
from sync.errors import InputError

MODELS = ("logistic", "forest", "boosting")  # export/detector_models.py; named here so --help starts fast


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "check", help="grouped cross-validated detector check of exported windows, by group and across groups",
        description="Fit a detector per dimension, tuned by nested cross-validation with folds of whole learners, "
                    "and report Cohen's kappa, AUC and calibration beside majority and stratified baselines; "
                    "optionally per group of learners (--by) and on groups it was not trained on (--transfer).",
    )
    parser.add_argument("windows", type=Path, metavar="WINDOWS", help="file written by fieldmark export")
    parser.add_argument("--dimension", action="append", metavar="D", help="check only this dimension (repeatable)")
    parser.add_argument("--model", choices=MODELS, default="logistic",
                        help="logistic regression, random forest or histogram gradient boosting (default %(default)s)")
    parser.add_argument("--folds", type=int, help="outer folds of learners (default 5, fewer when there are fewer learners)")
    parser.add_argument("--seed", type=int, default=0, help="seed of folds, models and bootstrap (default %(default)s)")
    parser.add_argument("--by", action="append", metavar="ATTRIBUTE",
                        help="figures per group of this roster attribute carried into the export (repeatable)")
    parser.add_argument("--transfer", metavar="ATTRIBUTE",
                        help="train on some groups of this attribute, test on another (leave one out, and the "
                             "train-A/test-B matrix for 2-6 groups)")
    parser.add_argument("--min-learners", type=int, default=5,
                        help="groups with fewer learners are reported as too small (default %(default)s)")
    parser.add_argument("--resamples", type=int, default=1000,
                        help="learner-cluster bootstrap resamples for group intervals (default %(default)s)")
    parser.add_argument("--weight", choices=("none", "confidence"), default="none",
                        help="weight training windows by the label-confidence posterior of their label")
    parser.add_argument("--report", type=Path, metavar="FILE", help="write a self-contained HTML report")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    if args.folds is not None and args.folds < 2:
        raise InputError(None, "--folds", "needs at least 2 folds")
    if args.min_learners < 2:
        raise InputError(None, "--min-learners", f"{args.min_learners} is too few; a group needs at least 2 learners")
    if args.resamples < 100:
        raise InputError(None, "--resamples", f"{args.resamples} is too few for a 95 % interval; use 100 or more")
    if args.report is not None and not args.report.parent.is_dir():
        raise InputError(args.report, None, "its folder does not exist; create it or choose another --report path")
    if not 0 <= args.seed < 2**32:
        raise InputError(None, "--seed", f"must be a whole number from 0 to {2**32 - 1}")
    manifest = read_manifest(args.windows)
    labels = manifest["label_columns"]
    for dimension in args.dimension or []:
        if dimension not in labels:
            raise InputError(args.windows, dimension, f"no such dimension; the file has {', '.join(labels)}")
    # scikit-learn and matplotlib load only when the check runs
    from export.detector_check import DEFAULT_FOLDS, CheckSettings, check_windows

    settings = CheckSettings(model=args.model, folds=args.folds or DEFAULT_FOLDS, seed=args.seed,
                             by=tuple(args.by or ()), transfer=args.transfer, weight=args.weight,
                             min_learners=args.min_learners, resamples=args.resamples)
    results = check_windows(args.windows, args.dimension, settings)
    payload = check_payload(args.windows, settings, results, manifest.get("coverage"))
    if args.report is not None:
        from export.audit_report import audit_report

        publish_text(args.report, audit_report(payload))
    if args.json:
        sys.stdout.write(json.dumps(payload) + "\n")
        return 0
    if manifest.get("coverage"):  # files from before the manifest recorded coverage have none
        print(coverage_lines(manifest["coverage"])[0])
    print(human_summary(payload))
    return 0


def check_payload(windows: Path, settings, results, coverage: dict | None = None) -> dict:
    """The JSON object (keys documented in export/tables.py, CHECK OUTPUT)."""
    from export.nested_search import INNER_FOLDS

    return {
        "windows": str(windows), "model": settings.model, "folds": settings.folds, "inner_folds": INNER_FOLDS,
        "seed": settings.seed, "weight": settings.weight, "min_learners": settings.min_learners,
        "resamples": settings.resamples, "confidence": 0.95, "by": list(settings.by), "transfer": settings.transfer,
        "coverage": coverage,
        "dimensions": {result.dimension: result.as_dict() for result in results},
    }


def human_summary(payload: dict) -> str:
    """The printed table: pooled figures, then per group and the transfer drop."""
    lines = [f"{'dimension':<16}{'rows':>7}{'learners':>10}{'kappa':>8}{'AUC':>7}{'Brier':>7}   "
             f"baseline kappa/AUC (majority, stratified)   model {payload['model']}"]
    for name, result in payload["dimensions"].items():
        model, majority, stratified = result["model"], result["majority_baseline"], result["stratified_baseline"]
        lines.append(
            f"{name:<16}{result['rows']:>7}{result['learners']:>10}{_figure(model['kappa']):>8}"
            f"{_figure(model['auc']):>7}{_figure(result['calibration']['brier']):>7}   "
            f"{_figure(majority['kappa'])}/{_figure(majority['auc'])}, "
            f"{_figure(stratified['kappa'])}/{_figure(stratified['auc'])}")
    for name, result in payload["dimensions"].items():
        for attribute, groups in result["by"].items():
            lines.append(f"{name} by {attribute}:")
            lines.extend("  " + group_line(group) for group in groups)
        transfer = result["transfer"]
        if transfer:
            lines.append(f"{name} transfer across {payload['transfer']} (train on the others, test on one; "
                         "within-group CV at the same training size):")
            for cell in transfer["leave_one_group_out"]:
                lines.append(f"  test {cell['group']}: kappa {_figure(cell['transfer']['kappa'])} vs within "
                             f"{_figure(cell['within']['kappa'])} (drop {_figure(cell['drop']['kappa'])}), "
                             f"{cell['training_learners']} training learners")
            if transfer["too_small"]:
                lines.append(f"  left out (too few learners): {', '.join(transfer['too_small'])}")
    return "\n".join(lines)


def group_line(group: dict) -> str:
    """One group's line: size, kappa with interval, difference from the rest."""
    size = f"{group['group']}: {group['learners']} learners, {group['windows']} windows"
    if group["too_small"]:
        return f"{size}: too small to score"
    difference = group["difference_from_rest"]
    versus = "" if difference is None else f", minus rest {_interval(difference['kappa'])}"
    return f"{size}: kappa {_interval(group['kappa'])}, AUC {_interval(group['auc'])}{versus}"


def _interval(estimate: dict) -> str:
    if estimate["value"] is None:
        return "-"
    if estimate["low"] is None:
        return f"{estimate['value']:.2f}"
    return f"{estimate['value']:.2f} [{estimate['low']:.2f}, {estimate['high']:.2f}]"


def _figure(value: float | None) -> str:
    return "-" if value is None else f"{value:.2f}"
