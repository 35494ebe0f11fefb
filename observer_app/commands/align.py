"""``fieldmark align STUDY``: fit each coder device's clock model against the logs and store it."""
from __future__ import annotations

import argparse
import json
import math
import sys

from observer_app.pipeline.alignment import METHODS, align_study, model_summary
from observer_app.study.folder import load_study
from sync.errors import InputError
from sync.plausible_values import LARGEST_OFFSET_SECONDS


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "align", help="fit each device's clock model against the logs",
        description="Put every coder device on the log's clock: from sync marks, by an automatic scan of "
                    "the codes against log activity, or by hand; the chosen model is stored in the study.",
    )
    parser.add_argument("study", metavar="STUDY", help="the study folder")
    parser.add_argument("--method", choices=METHODS, default="best",
                        help="marks, auto, or best: marks when a device has 3 or more usable (default)")
    parser.add_argument("--set-offset", action="append", default=[], metavar="DEVICE=SECONDS",
                        help="take this device's offset by hand (device ahead of the log: positive); repeatable")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
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


def run(args: argparse.Namespace) -> int:
    offsets = parse_offsets(args.set_offset)
    study = load_study(args.study)
    alignment = align_study(study, args.method, offsets, progress=not args.json)
    report = alignment.read_report
    if args.json:
        payload = {
            "study": str(study.dir),
            "devices": {device: model_summary(model) for device, model in alignment.models.items()},
            "skipped": alignment.skipped,
            "logs": {"rows_per_file": report.rows_per_file, "ambiguous_local_times": report.ambiguous_local_times,
                     "nonexistent_local_times": report.nonexistent_local_times,
                     "unknown_learners": report.unknown_learners, "warnings": report.warnings},
        }
        sys.stdout.write(json.dumps(payload) + "\n")
        return 0
    if report.rows_per_file:
        print(f"read {report.rows} log events from {len(report.rows_per_file)} files")
    for warning in report.warnings:
        print(f"  note: {warning}")
    print(f"{'device':<16}{'method':<9}{'offset_s':>10}{'se_s':>7}{'drift_ppm':>11}{'marks':>7}{'median|res|_s':>15}"
          f"{'confidence':>12}")
    for device, model in alignment.models.items():
        figures = model_summary(model)
        print(f"{device:<16}{model.method:<9}{_shown(figures['offset_s'], '+.3f'):>10}"
              f"{_shown(figures['offset_standard_error_s'], '.2f'):>7}{_shown(figures['drift_ppm'], '+.2f'):>11}"
              f"{model.marks_used:>7}"
              f"{_shown(figures['median_abs_residual_s'], '.3f'):>15}{_shown(figures['confidence'], '.2f'):>12}")
        for warning in model.warnings:
            print(f"  {device}: {warning}")
    for device, reason in alignment.skipped.items():
        print(f"{device:<16}skipped: {reason}")
    print("stored the chosen model per device in the study")
    return 0


def _shown(value: float | None, spec: str) -> str:
    return "-" if value is None else format(value, spec)
