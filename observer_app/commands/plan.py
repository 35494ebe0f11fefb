"""``fieldmark plan``: paired observations a reliability session needs (agreement.planning)."""
from __future__ import annotations

import argparse
import json
import math
import sys

from observer_app.commands.arguments import json_option
from agreement.planning import pairs_needed
from sync.errors import InputError


SMALLEST_SHARE = 0.001


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "plan", help="paired observations needed for a kappa interval of a given width",
        description="Simulates two coders at the expected kappa and code shares; the smallest number of "
                    "independent pairs whose 95 %% interval is no wider than --width.")
    parser.add_argument("--kappa", type=float, required=True, help="expected kappa, e.g. 0.7")
    parser.add_argument("--width", type=float, required=True, help="full width of the 95 %% interval, e.g. 0.2")
    parser.add_argument("--prevalence", required=True,
                        help="expected share of each code, comma-separated, e.g. 0.6,0.3,0.1")
    parser.add_argument("--seed", type=int, default=1, help="simulation seed (default 1)")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    try:
        shares = [float(part) for part in args.prevalence.split(",")]
    except ValueError:
        raise InputError(None, "--prevalence", "give numbers separated by commas, e.g. 0.6,0.3,0.1") from None
    if len(shares) < 2 or not all(math.isfinite(share) and share > 0 for share in shares):
        raise InputError(None, "--prevalence", "give at least two positive shares")
    if min(shares) / sum(shares) < SMALLEST_SHARE:
        raise InputError(None, "--prevalence", f"a code share below {SMALLEST_SHARE} of the total leaves kappa "
                         "undefined in most samples; give shares like 0.6,0.3,0.1")
    if not 0 <= args.seed < 2**32:
        raise InputError(None, "--seed", f"must be a whole number from 0 to {2**32 - 1}")
    if not 0 < args.kappa < 1:
        raise InputError(None, "--kappa", "must be between 0 and 1")
    if not 0 < args.width < 2:
        raise InputError(None, "--width", "must be between 0 and 2")
    try:
        plan = pairs_needed(args.kappa, shares, args.width, seed=args.seed)
    except ValueError as error:
        raise InputError(None, "--width", f"{error}; ask for a wider interval") from None
    if args.json:
        sys.stdout.write(json.dumps({"pairs": plan.pairs, "width": plan.width,
                                     "achieved_width": plan.achieved_width, "kappa": plan.kappa,
                                     "prevalence": list(plan.prevalence), "confidence": plan.confidence}) + "\n")
    else:
        sys.stdout.write(f"{plan.pairs} independent paired observations give a 95 % interval about "
                         f"{plan.achieved_width:.3f} wide at kappa {plan.kappa:g} (asked: {plan.width:g}).\n"
                         "Several pairs per learner widen the interval: plan more pairs than this.\n")
    return 0
