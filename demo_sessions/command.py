"""``fieldmark demo --out DIR [--seed N]``: build the demo study and run the whole pipeline on it.

The pipeline (and with it scikit-learn and matplotlib) is imported only when the verb
runs, so `fieldmark --help` and the other verbs start fast.
"""
from __future__ import annotations

import argparse
import json
from pathlib import Path


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "demo", help="build the demo study and run every step on it",
        description="Generate the demo study (apprentice electricians on a panel-wiring simulator, two centres, two "
                    "coders, known truth) into DIR/study, run every pipeline step, and write DIR/summary.json and "
                    "DIR/report.html.")
    parser.add_argument("--out", type=Path, required=True, help="output folder (new or without a previous demo)")
    parser.add_argument("--seed", type=int, default=1, help="generator seed (default 1)")
    parser.add_argument("--json", action="store_true", help="print the summary as one JSON object")
    parser.set_defaults(run=run)


def _estimate(figure: dict) -> str:
    if figure["value"] is None:
        return "undefined"
    return f"{figure['value']:.2f} [{figure['low']:.2f}, {figure['high']:.2f}]"


def _number(value: float | None) -> str:
    return "undefined" if value is None else f"{value:.2f}"


def human_summary(summary: dict) -> str:
    """The few lines printed at the end: what was built, what each step found."""
    generated = summary["generated"]
    lines = [f"demo study: {summary['study']} ({generated['learners']} learners, {generated['events']} log events, "
             f"{generated['observations']} coded windows)"]
    for device, figures in summary["devices"].items():
        truth, recovered = figures["truth"], figures["recovered"]
        lines.append(f"  {device}: truth {truth['offset_s']:+.2f} s at {truth['reference']}, {truth['drift_ppm']:+.1f} ppm")
        for key, label in (("recovered", "aligned"), ("recovered_automatic", "automatic scan")):
            model = figures.get(key)
            if model:
                error = model["versus_truth"]
                flagged = [w.split(":")[0] for w in model.get("warnings") or [] if "uncertain" in w]
                lines.append(f"    {label} ({model['method']}): {model['offset_s']:+.2f} s at the same instant, {model['drift_ppm']:+.1f} ppm "
                             f"(error {error['offset_error_s']:+.2f} s, {error['drift_error_ppm']:+.1f} ppm)"
                             + (f"; align warned: {', '.join(flagged)}" if flagged else ""))
        if not recovered:
            lines.append("    not aligned (no align step)")
    for dimension, figures in (summary["dimensions"] or {}).items():
        kappa, alpha = figures["kappa"], figures["alpha"]
        lines.append(f"  coder agreement, {dimension}: Cohen's kappa {_estimate(kappa)}, "
                     f"Krippendorff's alpha {_estimate(alpha)} ({figures['units']} paired windows)")
    for dimension, coders in (summary["coder_vs_truth"] or {}).items():
        shown = ", ".join(f"{coder} {values['kappa']:.2f}" for coder, values in coders.items())
        lines.append(f"  coder vs truth (demo check), {dimension}: kappa {shown}")
    if summary["windows"]:
        lines.append(f"  windows written: {summary['windows']['written']} -> {summary['windows']['path']}")
    for dimension, check in (summary["detector"] or {}).items():
        model, baseline = check["model"], check["majority_baseline"]
        lines.append(f"  detector check, {dimension}: kappa {_number(model['kappa'])}, AUC {_number(model['auc'])} "
                     f"(majority baseline {_number(baseline['kappa'])}, {_number(baseline['auc'])}; "
                     f"{check['learners']} learners in {check['folds']} folds)")
    out = Path(summary["study"]).parent
    lines.append(f"wrote {out / 'summary.json'} and {out / 'report.html'} in {summary['seconds']:.1f} s")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    from demo_sessions.pipeline import run_demo

    summary = run_demo(args.out, args.seed)
    print(json.dumps(summary) if args.json else human_summary(summary))
    return 0
