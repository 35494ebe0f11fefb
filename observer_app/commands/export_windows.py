"""``fieldmark export STUDY --out FILE``: labelled, de-identified windows for detector training.

Glue only: the study (observer_app.study), the store, the logs (sync.read_logs), the
clock models and windows on the log's clock (sync), the pairing of coders into units
(agreement.pairing), then export/ for features, labels, pseudonyms and the file.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from tqdm import tqdm

from agreement.pairing import pair_observations
from export.features import FeatureSettings
from export.labelled_windows import ExportSettings, label_windows
from export.pseudonyms import read_secret_key
from export.tables import LABEL_POLICIES, UNIT
from export.writer import FORMATS, build_manifest, file_digests, manifest_path, write_windows
from observer_app import __version__
from observer_app.store import Store
from observer_app.study import ROSTER_FILE, SCHEME_FILE, load_study
from sync.clock import ClockModel
from sync.errors import InputError
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs
from sync.windows import ANCHORS, observations_to_windows

CLOCK_SUMMARY_KEYS = ("device", "method", "offset_s", "drift_ppm", "reference_ns", "marks_used",
                      "median_abs_residual_s", "confidence")
STEPS = ("read the study", "read the logs", "put observations on the log's clock", "pair coders",
         "features and labels", "write")


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "export", help="labelled, de-identified windows (Parquet or CSV) and a manifest",
        description="One row per coded window (coders of the same window merged): learner pseudonym, "
                    "roster attributes, labels with their source, and log features of the window.",
    )
    parser.add_argument("study", type=Path, metavar="STUDY", help="the study folder")
    parser.add_argument("--out", type=Path, required=True, metavar="FILE", help="windows file to write")
    parser.add_argument("--format", choices=FORMATS, help="default: from FILE's suffix (.csv -> csv, else parquet)")
    parser.add_argument("--anchor", choices=ANCHORS, default="start",
                        help="window around the observed window's start (default) or the coding time")
    parser.add_argument("--before", type=float, default=0.0, metavar="S", help="seconds before the anchor (default 0)")
    parser.add_argument("--after", type=float, metavar="S",
                        help="seconds after the anchor (default: the observed window's end; 0 for --anchor coded, which then needs --before)")
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
    parser.add_argument("--keep-ids", action="store_true",
                        help="export raw learner ids and log ids instead of pseudonyms (explicit opt-in)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    output_format = _output_format(args)
    for option, value in (("--before", args.before), ("--after", args.after), ("--rapid-seconds", args.rapid_seconds),
                          ("--top-actions", args.top_actions)):
        if value is not None and value < 0:
            raise InputError(None, option, "must be zero or more")
    features = FeatureSettings(
        top_actions=args.top_actions, rapid_seconds=args.rapid_seconds, help_actions=_names(args.help_actions),
        error_outcomes=_names(args.error_outcomes), success_outcomes=_names(args.success_outcomes),
    )
    if not args.out.parent.is_dir():
        raise InputError(args.out, None, "its folder does not exist")
    # disable=None: shown on a terminal only, so piped stderr keeps its one-line errors
    progress = tqdm(total=len(STEPS), unit="step", desc="export", file=sys.stderr, disable=True if args.json else None)
    with progress:
        progress.set_postfix_str(STEPS[0])
        study = load_study(args.study)
        key = None if args.keep_ids else read_secret_key(study.key_path)
        dimensions = list(study.scheme.dimension_names)
        could_not_observe = {dimension.name: dimension.could_not_observe for dimension in study.scheme.dimensions}
        with Store(study.store_path) as store:
            observations = store.observations(dimensions)
            adjudications = store.adjudications()
            stored_models = store.clock_models()
        if observations.empty:
            raise InputError(study.store_path, None, "no observations to export; code or import some first")
        progress.update()

        progress.set_postfix_str(STEPS[1])
        specs = [log_spec_from_toml(entry, study.dir, index) for index, entry in enumerate(study.log_entries)]
        if not specs:
            raise InputError(study.dir / "study.toml", "logs", "no [[logs]] entries; export needs the learning logs")
        events, read_report = read_logs(specs, study.roster["log_id"].dropna().astype(str))
        progress.update()

        progress.set_postfix_str(STEPS[2])
        models = {str(row.device): ClockModel.from_json(row.model_json) for row in stored_models.itertuples()}
        try:
            windows = observations_to_windows(observations, models, study.roster, args.anchor, args.before, args.after)
        except ValueError as error:
            raise InputError(None, "--before/--after", str(error)) from None
        progress.update()

        progress.set_postfix_str(STEPS[3])
        units, pairing = pair_observations(observations, dimensions, tolerance_s=study.window_seconds / 2.0)
        windows[UNIT] = windows["observation_id"].map(units.set_index("observation_id")[UNIT]) if len(units) else None
        progress.update()

        progress.set_postfix_str(STEPS[4])
        settings = ExportSettings(features=features, policy=args.labels,
                                  keep_could_not_observe=args.keep_could_not_observe, keep_ids=args.keep_ids)
        result = label_windows(events, windows, study.roster, dimensions, could_not_observe, key, adjudications, settings)
        progress.update()

        progress.set_postfix_str(STEPS[5])
        inputs = [(path, path.relative_to(study.dir).as_posix() if path.is_relative_to(study.dir) else path.name)
                  for spec in specs for path in spec.files()]
        inputs += [(study.dir / name, name) for name in (SCHEME_FILE, ROSTER_FILE)]
        parameters = {
            **settings.parameters(),
            "window": {"anchor": args.anchor, "before_s": args.before, "after_s": args.after},
            "pairing_tolerance_s": study.window_seconds / 2.0,
        }
        manifest = build_manifest(
            result, version=__version__, scheme_hash=study.scheme.content_hash, parameters=parameters,
            clock_models=[_clock_summary(model) for model in models.values()],
            inputs=file_digests(*zip(*inputs)), output_format=output_format,
        )
        beside = write_windows(result, args.out, manifest)
        progress.update()

    summary = {
        "out": str(args.out), "manifest": str(beside), "format": output_format, "rows": manifest["rows"],
        "rows_per_label": manifest["rows_per_label"], "events": int(len(events)),
        "observations": int(len(observations)), "units": pairing.units,
        "warnings": list(read_report.warnings) + list(windows.attrs.get("warnings", [])),
    }
    if args.json:
        sys.stdout.write(json.dumps(summary) + "\n")
    else:
        print(f"wrote {summary['rows']} windows to {args.out} (manifest {manifest_path(args.out).name})")
        for dimension, counts in summary["rows_per_label"].items():
            print(f"  {dimension}: " + ", ".join(f"{code} {count}" for code, count in counts.items()))
        for warning in summary["warnings"]:
            print(f"  warning: {warning}")
    return 0


def _clock_summary(model: ClockModel) -> dict:
    """What the manifest keeps of a clock model: the fit, not its evidence (the sync
    marks' residuals name learners, so they stay in the study)."""
    return {key: value for key, value in json.loads(model.to_json()).items() if key in CLOCK_SUMMARY_KEYS}


def _names(option: str) -> tuple[str, ...]:
    """A comma-separated option as a tuple of names."""
    return tuple(name.strip() for name in option.split(",") if name.strip())


def _output_format(args: argparse.Namespace) -> str:
    """--format, else the output file's suffix."""
    if args.format:
        return args.format
    return "csv" if args.out.suffix.lower() == ".csv" else "parquet"
