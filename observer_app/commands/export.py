"""``fieldmark export STUDY --out FILE``: labelled, de-identified windows for detector training.

Options are checked here; the work is ``observer_app.pipeline.study_export.export_study``.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from observer_app.commands.arguments import json_option, study_argument
from export.features import FeatureSettings
from export.labelled_windows import ExportSettings
from export.tables import LABEL_POLICIES
from export.writer import FORMATS, manifest_path
from observer_app.pipeline.coverage import coverage_lines
from observer_app.pipeline.study_export import WindowChoice, export_study
from observer_app.study.folder import load_study
from observer_app.study.output_paths import check_output
from sync.errors import InputError
from sync.plausible_values import LONGEST_WINDOW_SECONDS, check_option_seconds
from sync.windows import ANCHORS


MOST_TOP_ACTIONS = 1000


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "export", help="labelled, de-identified windows (Parquet or CSV) and a manifest",
        description="One row per coded window (coders of the same window merged): learner pseudonym, "
                    "roster attributes, labels with their source, and log features of the window.",
    )
    study_argument(parser)
    parser.add_argument("--out", type=Path, required=True, metavar="FILE", help="windows file to write")
    parser.add_argument("--format", choices=FORMATS, help="default: from FILE's suffix (.csv -> csv, else parquet)")
    parser.add_argument("--anchor", choices=ANCHORS, default="start",
                        help="window around the observed window's start (default) or the coding time")
    parser.add_argument("--before", type=float, default=0.0, metavar="S", help="seconds before the anchor (default 0)")
    parser.add_argument("--after", type=float, metavar="S",
                        help="seconds after the anchor (default: the observed window's end; "
                             "with --anchor coded 0, which then needs --before)")
    parser.add_argument("--labels", choices=LABEL_POLICIES, default="first-coder",
                        help="label when coders disagree and nobody adjudicated (default first-coder)")
    parser.add_argument("--keep-could-not-observe", action="store_true", help="keep could-not-observe labels")
    defaults = FeatureSettings()
    parser.add_argument("--help-actions", metavar="A,B", default=",".join(defaults.help_actions),
                        help="actions that are help requests (default %(default)s)")
    parser.add_argument("--error-outcomes", metavar="A,B", default=",".join(defaults.error_outcomes),
                        help="outcomes that are errors (default %(default)s)")
    parser.add_argument("--success-outcomes", metavar="A,B", default=",".join(defaults.success_outcomes),
                        help="outcomes that are successes (default %(default)s)")
    parser.add_argument("--rapid-seconds", type=float, default=defaults.rapid_seconds, metavar="S",
                        help="an action this soon after the previous one is rapid (default %(default)s)")
    parser.add_argument("--top-actions", type=int, default=defaults.top_actions, metavar="K",
                        help="one count column for each of the K most frequent actions (default %(default)s)")
    parser.add_argument("--attribute", action="append", metavar="COLUMN",
                        help="export this roster column (repeatable; default: [export] attributes in study.toml, "
                             "else none). Identifying columns and groups of fewer than 5 learners are refused")
    parser.add_argument("--keep-ids", action="store_true",
                        help="export raw learner ids and log ids instead of pseudonyms (explicit opt-in)")
    parser.add_argument("--force", action="store_true", help="replace FILE (and its manifest) if they exist")
    json_option(parser)
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    output_format = _output_format(args)
    for option, value in (("--before", args.before), ("--after", args.after), ("--rapid-seconds", args.rapid_seconds)):
        check_option_seconds(option, value, LONGEST_WINDOW_SECONDS)
    if not 0 <= args.top_actions <= MOST_TOP_ACTIONS:
        raise InputError(None, "--top-actions", f"must be from 0 to {MOST_TOP_ACTIONS}")
    study = load_study(args.study)
    for path in (args.out, manifest_path(args.out)):
        check_output(path, "--out", study_dir=study.dir, log_paths=[spec.path for spec in study.logs], force=args.force)
    features = FeatureSettings(
        top_actions=args.top_actions, rapid_seconds=args.rapid_seconds, help_actions=_names(args.help_actions),
        error_outcomes=_names(args.error_outcomes), success_outcomes=_names(args.success_outcomes),
    )
    settings = ExportSettings(features=features, policy=args.labels,
                              keep_could_not_observe=args.keep_could_not_observe, keep_ids=args.keep_ids,
                              attributes=tuple(args.attribute) if args.attribute else study.export_attributes)
    window = WindowChoice(anchor=args.anchor, before_s=args.before, after_s=args.after)
    summary = export_study(args.study, args.out, output_format, window, settings, progress=False if args.json else None)
    if args.json:
        sys.stdout.write(json.dumps(summary) + "\n")
        return 0
    print(f"wrote {summary['rows']} windows to {args.out} (manifest {manifest_path(args.out).name})")
    for dimension, counts in summary["rows_per_label"].items():
        print(f"  {dimension}: " + ", ".join(f"{code} {count}" for code, count in counts.items()))
    for line in coverage_lines(summary["coverage"]):
        print(f"  {line}")
    for warning in summary["warnings"]:
        print(f"  warning: {warning}")
    return 0


def _names(option: str) -> tuple[str, ...]:
    """A comma-separated option as a tuple of names."""
    return tuple(name.strip() for name in option.split(",") if name.strip())


def _output_format(args: argparse.Namespace) -> str:
    """--format, else the output file's suffix."""
    if args.format:
        return args.format
    return "csv" if args.out.suffix.lower() == ".csv" else "parquet"
