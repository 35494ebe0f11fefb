"""Exporting a study's labelled windows: the glue behind `fieldmark export` and the demo.

The study (observer_app.study.folder), the store, the logs (sync.read_logs), the study's
units (observer_app.pipeline.units: observations on the log's clock, paired exactly as
``fieldmark agree`` pairs them, adjudications placed by the observations they settle),
windows on the log's clock (sync.windows), then export/ for features, labels, pseudonyms
and the file.  Each of those decides its own part; this module only passes the tables along.
"""
from __future__ import annotations

import json
import sys
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
from tqdm import tqdm

from export.labelled_windows import ExportSettings, label_windows
from export.pseudonyms import pseudonym, read_secret_key
from export.tables import UNIT
from export.writer import build_manifest, file_digests, write_windows
from observer_app import __version__
from observer_app.pipeline.alignment import (models_in_effect, observed_log_ids, require_clock_models,
                                            stored_clock_decisions, stream_study_logs)
from observer_app.pipeline.coverage import coverage_report
from observer_app.study.roster import shared_log_id_problem
from observer_app.pipeline.units import require_placed, shift_warning, study_units
from observer_app.study.store import Store
from observer_app.study.folder import ROSTER_FILE, SCHEME_FILE, load_study
from observer_app.study.scheme_binding import check_scheme_binding
from sync.clock import ClockModel
from sync.coverage import Coverage, learner_coverage, unmatched_log_ids_problem
from sync.errors import InputError
from sync.windows import observations_to_windows

CLOCK_SUMMARY_KEYS = ("device", "method", "offset_s", "drift_ppm", "reference_ns", "marks_used",
                      "median_abs_residual_s", "confidence", "span_standard_error_s")
STEPS = ("read the study", "read the logs", "put observations on the log's clock", "pair coders",
         "features and labels", "write")


@dataclass(frozen=True)
class WindowChoice:
    """Where the window lies around each observation (sync/windows.py decides what it means)."""

    anchor: str = "start"
    before_s: float = 0.0
    after_s: float | None = None


def replay_sampling(store: Store, observations: pd.DataFrame) -> list[dict]:
    """The replay plans behind the exported observations: their sampling rule, digest and caution.

    A plan that keeps only clips with at least K events skews labels away from idle
    learners; whoever trains on the export must know, so the rule travels with it.
    """
    sessions = store.sessions()
    used = sessions[sessions["session_id"].isin(set(observations["session_id"]))]
    plan_ids = {str(order).removeprefix("plan:") for order in used["order"] if str(order).startswith("plan:")}
    plans = store.replay_plans()
    return [{"plan_id": row.plan_id, "rule": row.description, "clips_digest": row.clips_digest,
             **({"caution": "only clips with at least K log events were coded: labels are skewed away from "
                            "idle learners"} if json.loads(row.rule_json).get("min_events", 1) > 1 else {})}
            for row in plans.itertuples() if row.plan_id in plan_ids]


def export_study(
    study_dir: Path, out: Path, output_format: str = "parquet", window: WindowChoice = WindowChoice(),
    settings: ExportSettings = ExportSettings(), progress: bool | None = None,
) -> dict:
    """Write the study's labelled windows and manifest to ``out``; return a JSON-ready summary
    (out, manifest, format, rows, rows_per_label, events (the observed learners' events),
    events_read (log rows read to find them), observations, units, coverage, warnings).

    ``progress``: None shows a bar only on a terminal.  Raises InputError for the user's mistakes.
    """
    bar = tqdm(total=len(STEPS), unit="step", desc="export", file=sys.stderr,
               disable=None if progress is None else not progress)
    with bar:
        bar.set_postfix_str(STEPS[0])
        study = load_study(study_dir)
        key = None if settings.keep_ids else read_secret_key(study.key_path)
        dimensions = list(study.scheme.dimension_names)
        could_not_observe = {dimension.name: dimension.could_not_observe for dimension in study.scheme.dimensions}
        with Store(study.store_path) as store:
            check_scheme_binding(study, store)
            observations = store.observations(dimensions)
            adjudications = store.adjudications()
            sampling = replay_sampling(store, observations)
        if observations.empty:
            raise InputError(study.store_path, None, "no observations to export; code or import some first")
        shared = shared_log_id_problem(study.roster, observations["learner"])
        if shared:
            raise InputError(study.dir / ROSTER_FILE, "column log_id", shared)
        decisions = stored_clock_decisions(study)  # the clock history is read once
        models = models_in_effect(decisions)
        require_clock_models(study, observations, models)
        uncertain = dict(zip(decisions["model_key"].astype(str), decisions["uncertain_accepted"].astype(bool))) \
            if len(decisions) else {}
        found = study_units(study, observations, models)
        placed = require_placed(found, adjudications)
        bar.update()

        bar.set_postfix_str(STEPS[1])
        # Only the observed learners' logs are read (each whole: history features need it);
        # from the parsed-log cache block by block when it holds them, else loaded whole.
        observed = observed_log_ids(study, observations["learner"])
        events, read_report = stream_study_logs(study, "no [[logs]] entries; export needs the learning logs",
                                                only_log_ids=observed)
        bar.update()

        bar.set_postfix_str(STEPS[2])
        try:
            windows = observations_to_windows(observations, models, study.roster, window.anchor, window.before_s,
                                              window.after_s)
        except ValueError as error:
            raise InputError(None, "--before/--after", str(error)) from None
        coverage = learner_coverage(events, windows)
        problem = unmatched_log_ids_problem(coverage)
        if problem:
            raise InputError(study.dir / ROSTER_FILE, "column log_id", problem)
        bar.update()

        bar.set_postfix_str(STEPS[3])
        units = found.units
        windows[UNIT] = windows["observation_id"].map(units.set_index("observation_id")[UNIT]) if len(units) else None
        bar.update()

        bar.set_postfix_str(STEPS[4])
        result = label_windows(events, windows, study.roster, dimensions, could_not_observe, key, placed, settings)
        bar.update()

        bar.set_postfix_str(STEPS[5])
        inputs = [(path, path.relative_to(study.dir).as_posix() if path.is_relative_to(study.dir) else path.name)
                  for spec in study.logs for path in spec.files()]
        inputs += [(study.dir / name, name) for name in (SCHEME_FILE, ROSTER_FILE)]
        parameters = {
            **settings.parameters(),
            "window": {"anchor": window.anchor, "before_s": window.before_s, "after_s": window.after_s},
            "pairing_tolerance_s": found.report["pairing_tolerance_s"],
            "replay_sampling": sampling,
        }
        manifest = build_manifest(
            result, version=__version__, scheme_hash=study.scheme.content_hash, parameters=parameters,
            clock_models=[{**clock_summary(model, key), "clock": _pseudonymous(clock, key),
                           "uncertain_accepted": uncertain.get(clock, False)} for clock, model in models.items()],
            inputs=file_digests(*zip(*inputs), known=read_report.digests), output_format=output_format,
        )
        manifest["coverage"] = coverage.summary()
        shift_hints = found.report.get("clock_shift_hints", [])
        manifest["clock_shift_hints"] = [{**hint, "device": _pseudonymous(hint["device"], key),
                                          "other_device": _pseudonymous(hint["other_device"], key)}
                                         for hint in shift_hints]
        beside = write_windows(result, out, manifest)
        bar.update()
    accepted = sorted(key for key, flag in uncertain.items() if flag and key in models)
    clock_warnings = [f"clock {key} was stored above the uncertainty bound (--accept-uncertain); its windows may be "
                      "misplaced" for key in accepted]
    return {
        "out": str(out), "manifest": str(beside), "format": output_format, "rows": manifest["rows"],
        "rows_per_label": manifest["rows_per_label"], "events": int(len(events)), "events_read": read_report.rows_read,
        "observations": int(len(observations)), "units": found.report["units"],
        "coverage": coverage_report(coverage),
        "warnings": list(read_report.warnings) + list(windows.attrs.get("warnings", [])) + outside_warnings(coverage)
                    + clock_warnings + [shift_warning(hint) for hint in shift_hints],
    }



def outside_warnings(coverage: Coverage) -> list[str]:
    """One warning per observed learner whose log events all fall outside their observed windows."""
    return [f"learner {row.learner} (log_id {row.log_id!r}) has {row.events_in_logs} log events but none in any of "
            f"their {row.windows} observed windows; check the clock models (fieldmark align) and the log's timezone"
            for row in coverage.outside.itertuples()]


def _pseudonymous(clock: str, key: bytes | None) -> str:
    """A clock key ("device" or "device/session") as the manifest shows it: pseudonymised with the study's key."""
    return clock if key is None else pseudonym(clock, key)


def clock_summary(model: ClockModel, key: bytes | None = None) -> dict:
    """What the manifest keeps of a clock model: the fit, not its evidence (the sync
    marks' residuals name learners, so they stay in the study).  With the study's key
    the device name is pseudonymised (device names often carry a coder's name)."""
    summary = {name: value for name, value in json.loads(model.to_json()).items() if name in CLOCK_SUMMARY_KEYS}
    if key is not None and "device" in summary:
        summary["device"] = pseudonym(str(summary["device"]), key)
    return summary
