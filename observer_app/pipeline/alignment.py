"""Aligning a study: every coder device's clock model against the study's logs.

The one place that decides which method a device gets:
  "marks": a fit from its sync marks (devices without usable marks are skipped);
  "auto":  the automatic scan of its live observations;
  "best":  marks when at least MIN_MARKS_FOR_BEST marks name learners with log events,
           otherwise the automatic scan.
Hand-set offsets (--set-offset) win over all of them.  Replay observations are left out
of the scan (a replayed clip is coded against the log itself, not a device's wall
clock), and so are could-not-observe codes.
"""
from __future__ import annotations

from collections.abc import Iterable

import math
from dataclasses import dataclass, field

import pandas as pd
from tqdm import tqdm

from observer_app.study.store import Store, now_utc
from observer_app.study.folder import Study
from sync.clock import ClockModel, manual_model
from sync.clock_marks import fit_from_marks
from sync.clock_scan import scan_offset
from sync.errors import InputError
from sync.event_table import empty_events
from sync.logs import ReadReport, read_logs

METHODS: tuple[str, ...] = ("best", "marks", "auto")
MIN_MARKS_FOR_BEST = 3


@dataclass
class Alignment:
    """The chosen model per device, what reading the logs found, and devices left out."""

    models: dict[str, ClockModel]
    read_report: ReadReport
    skipped: dict[str, str] = field(default_factory=dict)


def align_study(study: Study, method: str = "best", manual_offsets: dict[str, float] | None = None,
                progress: bool = False, logs: tuple[pd.DataFrame, ReadReport] | None = None) -> Alignment:
    """Fit (or take by hand) a clock model per device and record each in the study's store."""
    alignment = fit_clock_models(study, method, manual_offsets, progress, logs)
    with Store(study.store_path) as store:
        at = now_utc()
        for device, model in alignment.models.items():
            store.record_clock_model(device, model.to_json(), at)
    return alignment


def fit_clock_models(study: Study, method: str = "best", manual_offsets: dict[str, float] | None = None,
                     progress: bool = False, logs: tuple[pd.DataFrame, ReadReport] | None = None) -> Alignment:
    """A clock model per device, without recording it; ``logs`` saves a second read of the logs."""
    manual_offsets = manual_offsets or {}
    with Store(study.store_path) as store:
        observations = store.observations(study.scheme.dimension_names)
        marks = store.sync_marks()
        devices = sorted(set(store.sessions()["device"].astype(str)))
    unknown = sorted(set(manual_offsets) - set(devices))
    if unknown:
        raise InputError(None, "--set-offset", f"no sessions from device {unknown[0]!r} in the store; "
                         f"devices are {', '.join(devices) or 'none yet (import observations first)'}")
    if not devices:
        raise InputError(study.store_path, None, "holds no coding sessions yet; import observations first")
    to_fit = [device for device in devices if device not in manual_offsets]
    if not to_fit:
        events, report = empty_events(), ReadReport()
    else:
        events, report = logs if logs is not None else read_study_logs(study)
    log_ids = dict(zip(study.roster["learner"].astype(str), study.roster["log_id"].astype(str)))
    observations = observations.assign(log_id=observations["learner"].astype(str).map(log_ids).fillna(""))
    marks = marks.assign(log_id=marks["learner"].astype(str).map(log_ids).fillna(""))
    known = set(events["learner"].cat.categories.astype(str))
    models = {device: manual_model(device, offset) for device, offset in manual_offsets.items()}
    skipped: dict[str, str] = {}
    for device in tqdm(to_fit, desc="aligning devices", unit="device", disable=not progress):
        device_marks = marks[(marks["device"] == device) & marks["log_id"].isin(known)]
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        use_marks = method == "marks" or (method == "best" and len(device_marks) >= MIN_MARKS_FOR_BEST)
        if use_marks and len(device_marks):
            models[device] = fit_from_marks(device_marks, events)
        elif use_marks:
            skipped[device] = "no sync marks that name a learner with log events"
        elif len(live):
            models[device] = scan_offset(_observable(live, study), events, list(study.scheme.dimension_names))
        else:
            skipped[device] = "no live observations to scan"
    return Alignment(models=dict(sorted(models.items())), read_report=report, skipped=skipped)


def _observable(observations: pd.DataFrame, study: Study) -> pd.DataFrame:
    """Could-not-observe codes blanked: they say nothing about what the learner did."""
    observations = observations.copy()
    for dimension in study.scheme.dimensions:
        column = observations[dimension.name]
        observations[dimension.name] = column.where(column != dimension.could_not_observe)
    return observations


PARSED_LOGS_DIR = "parsed_logs"  # sync/log_cache.py: owner-only, keyed by digest, never exported
NO_LOGS_FOR_ALIGN = ("no logs declared; add a [[logs]] entry, "
                     "or give every device's offset with --set-offset DEVICE=SECONDS")


def read_study_logs(study: Study, if_missing: str = NO_LOGS_FOR_ALIGN,
                    only_log_ids: Iterable[str] | None = None) -> tuple[pd.DataFrame, ReadReport]:
    """The study's [[logs]] as one EVENTS table (sync/tables.py), learners checked against the roster.

    ``if_missing`` is what to tell the user when study.toml declares no logs;
    ``only_log_ids`` keeps just those learners' (whole) logs, filtered while reading.
    """
    if not study.logs:
        raise InputError(study.dir / "study.toml", "[[logs]]", if_missing)
    return read_logs(study.logs, known_log_ids=study.roster["log_id"].dropna().astype(str),
                     only_log_ids=only_log_ids, cache_dir=study.dir / PARSED_LOGS_DIR)


def stored_clock_models(study: Study) -> dict[str, ClockModel]:
    """The newest stored model per device (what everything downstream uses)."""
    with Store(study.store_path) as store:
        rows = store.clock_models()
    return {str(device): ClockModel.from_json(text) for device, text in zip(rows["device"], rows["model_json"])}


def model_summary(model: ClockModel) -> dict:
    """The figures align reports per device, JSON-ready (NaN -> null)."""
    def number(value: float, digits: int) -> float | None:
        return None if value is None or not math.isfinite(value) else round(float(value), digits)

    return {
        "method": model.method, "offset_s": number(model.offset_s, 3), "drift_ppm": number(model.drift_ppm, 2),
        "reference_ns": model.reference_ns, "marks_used": model.marks_used,
        "median_abs_residual_s": number(model.median_abs_residual_s, 3), "confidence": number(model.confidence, 3),
        "offset_standard_error_s": number(model.offset_standard_error_s, 3),
        "outlying_marks": model.outlying_marks, "warnings": list(model.warnings),
    }
