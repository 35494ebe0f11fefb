"""``fieldmark align STUDY``: fit each coder device's clock model against the logs and store it."""
from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from observer_app.commands.arguments import json_option, study_argument
from observer_app.pipeline.alignment import (DEFAULT_MAX_STANDARD_ERROR_S, METHODS, Alignment, align_study,
                                            clock_log_ids, clock_reference_ns, model_summary, read_study_logs,
                                            reference_text)
from observer_app.pipeline.coverage import coverage_lines, coverage_report, study_coverage
from observer_app.study.folder import load_study
from sync.errors import InputError
from sync.plausible_values import LARGEST_OFFSET_SECONDS


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "align", help="fit each device's clock model against the logs",
        description="Put every coder device on the log's clock: from sync marks, by an automatic scan of "
                    "the codes against log activity, or by hand.  Every model is added to the study's clock "
                    "history; a hand-set offset beats sync marks beats an automatic fit, and a plain align "
                    "never replaces a hand-set offset.  A fit whose standard error over the device's observed "
                    "span is not below the bound is refused (exit 2) unless --accept-uncertain is given.",
    )
    study_argument(parser)
    parser.add_argument("--method", choices=METHODS, default="best",
                        help="marks, auto, or best: marks when a device has 3 or more usable (default)")
    parser.add_argument("--set-offset", action="append", default=[], metavar="DEVICE=SECONDS",
                        help="take this device's offset by hand (device ahead of the log: positive); repeatable")
    parser.add_argument("--refit", action="append", default=[], metavar="DEVICE",
                        help="fit this device again even though its offset was set by hand (the new fit replaces "
                             "every earlier decision for it); repeatable")
    parser.add_argument("--max-standard-error", type=float, default=DEFAULT_MAX_STANDARD_ERROR_S, metavar="SECONDS",
                        help="store a fitted model only when its standard error over the device's observed span is "
                             f"below this (default {DEFAULT_MAX_STANDARD_ERROR_S:g} s)")
    parser.add_argument("--accept-uncertain", action="store_true",
                        help="store fits above the bound anyway (marked so in the history and in --json)")
    json_option(parser)
    parser.set_defaults(run=run)


def parse_offsets(texts: list[str]) -> dict[str, float]:
    """["laptop-a=31.5", ...] -> {"laptop-a": 31.5}; InputError naming the bad one."""
    offsets: dict[str, float] = {}
    for text in texts:
        device, sign, seconds = text.partition("=")
        try:
            value = float(seconds)
        except ValueError:
            value = math.nan
        if not sign or not device.strip() or not math.isfinite(value):
            raise InputError(None, "--set-offset", f"{text!r} is not DEVICE=SECONDS, e.g. laptop-a=31.5")
        if abs(value) > LARGEST_OFFSET_SECONDS:
            raise InputError(None, "--set-offset", f"{text!r}: more than {LARGEST_OFFSET_SECONDS:.0f} s (30 days) "
                             "is a wrong date on the device, not a clock offset; fix the device's date")
        offsets[device.strip()] = value
    return offsets


def command_line(args: argparse.Namespace) -> str:
    """The align command as the history records it (which command stored a model)."""
    parts = ["fieldmark align", "--method", args.method]
    parts += [f"--set-offset {text}" for text in args.set_offset] + [f"--refit {device}" for device in args.refit]
    if args.max_standard_error != DEFAULT_MAX_STANDARD_ERROR_S:
        parts.append(f"--max-standard-error {args.max_standard_error:g}")
    if args.accept_uncertain:
        parts.append("--accept-uncertain")
    return " ".join(parts)


def run(args: argparse.Namespace) -> int:
    offsets = parse_offsets(args.set_offset)
    if not (math.isfinite(args.max_standard_error) and args.max_standard_error > 0):
        raise InputError(None, "--max-standard-error", f"{args.max_standard_error!r} is not a positive number of seconds")
    study = load_study(args.study)
    reference = clock_reference_ns(study)
    # read once, for the fits and the coverage, and only the learners they use; hand-set
    # offsets need no logs, so logs not yet on disk stop align only when a fit needs them
    # (align_study reads them then); with nothing observed and no sync mark there is nothing
    # to read for, and align_study says what is missing without parsing a log
    present = bool(study.logs) and all(Path(spec.path).exists() for spec in study.logs)
    wanted = clock_log_ids(study) if present else []
    logs = read_study_logs(study, only_log_ids=wanted) if wanted else None
    try:
        alignment = align_study(study, args.method, offsets, progress=not args.json, logs=logs,
                                refit=tuple(args.refit), max_standard_error_s=args.max_standard_error,
                                accept_uncertain=args.accept_uncertain, command=command_line(args))
    except InputError as error:
        refused = getattr(error, "alignment", None)
        if args.json and refused is not None:  # what would have been stored and why; nothing was
            sys.stdout.write(json.dumps(_payload(study, refused, reference, stored=False)) + "\n")
        raise
    events = logs[0] if logs is not None else alignment.events
    coverage = study_coverage(study, events, alignment.models) if events is not None else None
    if args.json:
        payload = _payload(study, alignment, reference, stored=True)
        payload["coverage"] = None if coverage is None else coverage_report(coverage)
        sys.stdout.write(json.dumps(payload) + "\n")
        return 0
    report = alignment.read_report
    if report.rows_per_file:
        print(f"read {report.rows_read} log rows from {len(report.rows_per_file)} files; kept {report.rows} events "
              "of the observed learners")
    for warning in report.warnings:
        print(f"  note: {warning}")
    print(f"offsets at {reference_text(reference)} (the hour the study's first live session began); "
          f"se_s: standard error over the device's observed span, fits stored only below {args.max_standard_error:g} s")
    print(f"{'clock':<16}{'method':<9}{'offset_s':>10}{'se_s':>7}{'drift_ppm':>11}{'marks':>7}{'median|res|_s':>15}"
          f"{'confidence':>12}  decision")
    for key, model in alignment.models.items():
        figures = model_summary(model.at_reference(reference))
        decision = alignment.decisions.get(model.device)
        print(f"{key:<16}{model.method:<9}{_shown(figures['offset_s'], '+.3f'):>10}"
              f"{_shown(_span_error(figures), '.2f'):>7}{_shown(figures['drift_ppm'], '+.2f'):>11}"
              f"{model.marks_used:>7}"
              f"{_shown(figures['median_abs_residual_s'], '.3f'):>15}{_shown(figures['confidence'], '.2f'):>12}"
              f"  {decision.decision if decision else ''}")
        for warning in model.warnings:
            print(f"  {key}: {warning}")
    for device, decision in alignment.decisions.items():
        print(f"  {device}: {decision.decision}: {decision.reason}")
        if decision.second_opinion:
            opinion = decision.second_opinion
            print(f"  warning: {device}: the automatic scan puts this clock at {opinion['scan_offset_s']:+.1f} s "
                  f"(standard error {opinion['standard_error_s']:.1f} s), {opinion['difference_s']:+.1f} s from the "
                  f"hand-set offset{'; ' + opinion['looks_like'] if opinion['looks_like'] else ''}; the hand-set "
                  f"offset stays: check it, then --set-offset {device}=SECONDS to change it")
    for device, borrowing in alignment.borrowed.items():
        print(f"  {device}: borrowed {borrowing.partner}'s model, {borrowing.relative_offset_s:+.3f} s relative, "
              f"from {borrowing.marks_used} paired signal marks")
    for check in alignment.typed_differences:
        if check["agrees"] is False:
            print(f"  warning: {check['device']}'s coders typed a clock difference of {check['typed_s']:+.1f} s to "
                  f"{check['partner']}, but the paired signals measured {check['measured_s']:+.3f} s")
    for line in coverage_lines(coverage_report(coverage)) if coverage is not None else []:
        print(line)
    print("added the new models to the study's clock history")
    return 0


def _payload(study, alignment: Alignment, reference: int, stored: bool) -> dict:
    """The JSON of `fieldmark align --json`: per clock key the model stated at the reference
    instant, with the device's decision; per device the decision and why."""
    report = alignment.read_report
    devices = {}
    for key, model in alignment.models.items():
        decision = alignment.decisions.get(model.device)
        devices[key] = {**model_summary(model.at_reference(reference)), **(decision.as_dict() if decision else {})}
    return {
        "study": str(study.dir),
        "reference": reference_text(reference), "reference_ns": reference, "stored": stored,
        "devices": devices,
        "decisions": {device: decision.as_dict() for device, decision in alignment.decisions.items()},
        "skipped": alignment.skipped,
        "borrowed": {device: borrowing.as_dict() for device, borrowing in alignment.borrowed.items()},
        "typed_clock_differences": alignment.typed_differences,
        "logs": {"rows_read": report.rows_read, "rows": report.rows, "rows_per_file": report.rows_per_file,
                 "rows_read_per_file": report.rows_read_per_file, "ambiguous_local_times": report.ambiguous_local_times,
                 "nonexistent_local_times": report.nonexistent_local_times,
                 "unknown_learners": report.unknown_learners, "warnings": report.warnings},
    }


def _span_error(figures: dict) -> float | None:
    span = figures["span_standard_error_s"]
    return span if span is not None else figures["offset_standard_error_s"]


def _shown(value: float | None, spec: str) -> str:
    return "-" if value is None else format(value, spec)
