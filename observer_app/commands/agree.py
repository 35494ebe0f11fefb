"""``fieldmark agree STUDY|CSV``: inter-rater reliability per dimension, pair and session.

A study folder is paired with agreement.pairing (tolerance: half a window); a CSV is
long format (agreement.long_format).  Human output is a table; ``--json`` prints one
object whose keys are listed in agreement/tables.py.
"""
from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from observer_app.commands.arguments import json_option
from agreement.bootstrap import DEFAULT_RESAMPLES
from agreement.dimensions import LEVELS, Dimension
from agreement.disagreements import list_disagreements
from agreement.statistics import Agreement, agreement_json, assess_agreement, estimate_text, headline_kappa
from agreement.long_format import read_long_csv
from agreement.tables import FIGURE_KEYS, FIGURE_LABELS
from agreement.breakdowns import (
    CERTIFICATION_KAPPA, CERTIFICATION_PAIRS, ROLLING_WINDOW, by_pair, by_session, certify, rolling_kappa,
    units_of_coders,
)
from observer_app.pipeline.units import (
    StudyUnits, load_study_units, no_observations_error, placed_adjudications, shift_warning,
)
from observer_app.study.store import Store
from observer_app.study.output_paths import check_output, publish_text
from sync.errors import InputError
from sync.json_numbers import json_safe


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "agree", help="inter-rater reliability per dimension, coder pair and session",
        description="Kappa, alpha and friends with 95 % cluster-bootstrap intervals (resampling learners).")
    parser.add_argument("source", metavar="STUDY|CSV", help="a study folder, or a long-format CSV "
                        "(unit, coder, one column per dimension, optional learner)")
    json_option(parser)
    parser.add_argument("--level", choices=LEVELS, help="CSV only: level of measurement (default nominal)")
    parser.add_argument("--order", help="CSV only: ordered codes, lowest first, comma-separated")
    parser.add_argument("--coders", help="only these coders, comma-separated (e.g. ann,ben)")
    parser.add_argument("--by", choices=("pair", "session"), help="also give figures per coder pair or session")
    parser.add_argument("--report", type=Path, help="write a self-contained HTML reliability report here")
    parser.add_argument("--disagreements", type=Path, help="write the disagreeing pairs to this CSV")
    parser.add_argument("--include-could-not-observe", action="store_true",
                        help="treat the could-not-observe code as a code (default: leave it out)")
    parser.add_argument("--certify", metavar="REFERENCE", help="certify every other coder against this coder")
    parser.add_argument("--certify-kappa", type=float, default=CERTIFICATION_KAPPA,
                        help=f"kappa a coder must reach on every dimension (default {CERTIFICATION_KAPPA})")
    parser.add_argument("--certify-pairs", type=int, default=CERTIFICATION_PAIRS,
                        help=f"paired observations needed per dimension (default {CERTIFICATION_PAIRS})")
    parser.add_argument("--rolling-window", type=int, default=ROLLING_WINDOW,
                        help=f"units per rolling-kappa window (default {ROLLING_WINDOW})")
    parser.add_argument("--resamples", type=int, default=DEFAULT_RESAMPLES, help="bootstrap resamples (default 1000)")
    parser.add_argument("--seed", type=int, default=1, help="bootstrap seed (default 1)")
    parser.add_argument("--force", action="store_true", help="replace the --report or --disagreements file if it exists")
    parser.set_defaults(run=run)


def load_units(args: argparse.Namespace) -> tuple[pd.DataFrame, list[Dimension], dict[str, object] | None,
                                                   StudyUnits | None]:
    """Units from a study folder or a CSV, with the boundary checks of the options."""
    source = Path(args.source)
    if source.is_dir():
        if args.level or args.order:
            raise InputError(None, "--level/--order", "only for a CSV; a study's scheme sets each dimension's "
                                                      "level and code order")
        found = load_study_units(source)
        if found.observations.empty:
            raise no_observations_error(found)
        return found.units, found.dimensions, found.report, found
    if not source.exists():
        raise InputError(source, None, "no such study folder or CSV file")
    order = [code.strip() for code in args.order.split(",")] if args.order else None
    units, dimensions = read_long_csv(source, args.level, order)
    return units, dimensions, None, None


def select_coders(units: pd.DataFrame, coders_option: str | None) -> pd.DataFrame:
    if not coders_option:
        return units
    wanted = tuple(name.strip() for name in coders_option.split(",") if name.strip())
    known = set(units["coder"].astype(str))
    for name in wanted:
        if name not in known:
            raise InputError(None, "--coders", f"unknown coder {name!r}; coders are {', '.join(sorted(known))}")
    if len(wanted) < 2:
        raise InputError(None, "--coders", "name at least two coders, e.g. --coders ann,ben")
    return units_of_coders(units, wanted)


def print_table(agreement: Agreement, pairing: dict[str, object] | None, views: dict[str, Agreement],
                certification: dict[str, list] | None, source: str) -> None:
    out = sys.stdout
    out.write(f"Agreement for {source}: {agreement.units} units, {agreement.clusters} learners, "
              f"coders {', '.join(agreement.coders)}\n")
    out.write(f"95 % intervals: {agreement.resamples} bootstrap resamples of learners, seed {agreement.seed}\n")
    if pairing:
        per_coder = ", ".join(f"{coder} {count}" for coder, count in pairing["unmatched_by_coder"].items())
        out.write(f"Pairing: {pairing['observations']} observations, {pairing['units']} units, "
                  f"{pairing['unmatched']} unmatched{f' ({per_coder})' if per_coder else ''}\n")
        if pairing.get("unplaced_adjudications"):
            out.write(f"  warning: {pairing['unplaced_adjudications']} adjudications settle observations that are no "
                      "longer one unit (export stops on them); adjudicate the units --disagreements lists again\n")
        for hint in pairing.get("clock_shift_hints", []):
            out.write(f"  warning: {shift_warning(hint)}\n")
        if pairing.get("paired_run_not_overlapping"):
            out.write(f"  {pairing['paired_run_not_overlapping']} observations of paired runs left unpaired: "
                      "their windows do not overlap on the log's clock\n")
    for result in agreement.dimensions.values():
        out.write(f"\n{result.name} ({result.level}, {result.units} units) -- Landis & Koch: {result.band}\n")
        width = max(len(label) for label in FIGURE_LABELS.values())
        for key in FIGURE_KEYS:
            if result.figures[key].value is not None or key in ("cohen_kappa", "fleiss_kappa", "alpha"):
                shown = estimate_text(result.figures[key])
                if key == "cohen_kappa" and len(result.coders) != 2:
                    shown += " (needs exactly two coders: use --coders A,B or --by pair)"
                out.write(f"  {FIGURE_LABELS[key]:<{width}}  {shown}\n")
        for code, estimate in result.per_code_kappa.items():
            out.write(f"  {'kappa, ' + code + ' vs rest':<{width}}  {estimate_text(estimate)}\n")
        could_not = result.could_not_observe
        if could_not.code:
            out.write(f"  could not observe ({could_not.code}): {could_not.codes} codes, "
                      f"{could_not.units_one_coder_could_not} units where only one coder could not; "
                      f"{'included' if could_not.included else 'left out'}\n")
    if views:
        out.write("\nKappa by view\n")
        for label, view in views.items():
            cells = ", ".join(f"{name} {estimate_text(headline_kappa(item.figures))}"
                              for name, item in view.dimensions.items())
            out.write(f"  {label}: {cells}\n")
    if certification is not None:
        out.write("\nCertification\n")
        for coder, checks in certification.items():
            verdict = "certified" if all(check.passes for check in checks) else "not certified"
            details = ", ".join(f"{c.dimension} kappa {estimate_text(c.kappa)} on {c.pairs} pairs "
                                f"({'pass' if c.passes else 'fail'})" for c in checks)
            out.write(f"  {coder}: {verdict} -- {details}\n")


MOST_RESAMPLES = 100_000
MOST_UNITS = 1_000_000


def check_options(args: argparse.Namespace) -> None:
    """Every number in range, every output path writable and off the study's own files."""
    if not 1 <= args.resamples <= MOST_RESAMPLES:
        raise InputError(None, "--resamples", f"must be from 1 to {MOST_RESAMPLES} (1000 or more for a reported interval)")
    if not 2 <= args.rolling_window <= MOST_UNITS:
        raise InputError(None, "--rolling-window", f"must be from 2 to {MOST_UNITS}")
    if not 0 <= args.seed < 2**32:
        raise InputError(None, "--seed", f"must be a whole number from 0 to {2**32 - 1}")
    if not (math.isfinite(args.certify_kappa) and -1 <= args.certify_kappa <= 1):
        raise InputError(None, "--certify-kappa", f"{args.certify_kappa!r} is not a kappa between -1 and 1")
    if not 1 <= args.certify_pairs <= MOST_UNITS:
        raise InputError(None, "--certify-pairs", f"must be from 1 to {MOST_UNITS}")
    source = Path(args.source)
    for option, path in (("--report", args.report), ("--disagreements", args.disagreements)):
        if path is not None:
            check_output(path, option, study_dir=source if source.is_dir() else None,
                         log_paths=[] if source.is_dir() else [source], force=args.force)


def run(args: argparse.Namespace) -> int:
    check_options(args)
    units, dimensions, pairing, found = load_units(args)
    placed = None
    if found is not None:
        with Store(found.store_path) as store:
            placed, unplaced = placed_adjudications(found, store.adjudications())
        pairing = {**pairing, "unplaced_adjudications": len(unplaced)}
    units = select_coders(units, args.coders)
    include = args.include_could_not_observe
    if args.certify and args.certify not in set(units["coder"].astype(str)):
        raise InputError(None, "--certify", f"unknown reference coder {args.certify!r}")
    if args.by == "session" and not (units["session_id"].astype(str) != "").any():
        raise InputError(args.source, "--by session", "no session ids; add a session_id column to the CSV")

    agreement = assess_agreement(units, dimensions, args.resamples, args.seed, include)
    views: dict[str, Agreement] = {}
    if args.by == "pair":
        pairs = by_pair(units, dimensions, args.resamples, args.seed, include)
        views = {f"{a} + {b}": result for (a, b), result in tqdm(pairs.items(), desc="pairs", disable=None,
                                                                 file=sys.stderr)}
    elif args.by == "session":
        views = dict(by_session(units, dimensions, args.resamples, args.seed, include))
    certification = (certify(units, dimensions, args.certify, args.resamples, args.seed, args.certify_kappa,
                             args.certify_pairs, include) if args.certify else None)

    if args.disagreements:
        table = list_disagreements(units, dimensions, placed)
        publish_text(args.disagreements, table.to_csv(index=False))
    if args.report:
        # matplotlib and Jinja2: only loaded when a report is asked for
        from observer_app.reports.agreement_report import render_agreement_report

        rolling = {d.name: rolling_kappa(units, d, args.rolling_window, include) for d in dimensions}
        publish_text(args.report, render_agreement_report(f"Reliability report: {Path(args.source).name}",
                                                              agreement, rolling, args.rolling_window, pairing, views))

    if args.json:
        document = {
            "source": str(args.source), "coders": list(agreement.coders), "units": agreement.units,
            "clusters": agreement.clusters, "resamples": agreement.resamples, "seed": agreement.seed,
            "confidence": agreement.confidence, "pairing": pairing,
            "dimensions": agreement_json(agreement),
            "by": ([{args.by: label, "dimensions": agreement_json(view)} for label, view in views.items()]
                   if args.by else None),
            "certification": ({coder: {"certified": all(c.passes for c in checks),
                                       "dimensions": {c.dimension: {"pairs": c.pairs, "kappa": c.kappa.as_dict(),
                                                                    "passes": c.passes} for c in checks}}
                               for coder, checks in certification.items()} if certification is not None else None),
        }
        sys.stdout.write(json.dumps(json_safe(document)) + "\n")
    else:
        print_table(agreement, pairing, views, certification, str(args.source))
    return 0
