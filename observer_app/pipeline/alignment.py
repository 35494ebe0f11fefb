"""Aligning a study: every coder device's clock model against the study's logs.

The one place that decides which method a device gets:
  "marks": a fit from its sync marks (devices without usable marks are skipped);
  "auto":  the automatic scan of its live observations;
  "best":  marks when at least MIN_MARKS_FOR_BEST marks name learners with log events,
           otherwise the automatic scan.
Hand-set offsets (--set-offset) win over all of them.  A device left without a model of
its own borrows its paired partner's, moved by the relative offset read from the
runs' signal marks (``borrowed_models``).  Replay observations are left out
of the scan (a replayed clip is coded against the log itself, not a device's wall
clock), and so are could-not-observe codes.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from tqdm import tqdm

from observer_app.study.store import Store, now_utc
from observer_app.study.folder import Study
from sync.clock import ClockModel, manual_model
from sync.clock_pairs import partner_time_ns, relative_offsets
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
    borrowed: dict[str, "Borrowing"] = field(default_factory=dict)
    typed_differences: list[dict] = field(default_factory=list)


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
    marks = marks[marks["kind"].fillna("") == ""]  # signal marks match the partner, not the log
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
    to_scan = []
    for device in tqdm(to_fit, desc="aligning devices", unit="device", disable=not progress):
        device_marks = marks[(marks["device"] == device) & marks["log_id"].isin(known)]
        use_marks = method == "marks" or (method == "best" and len(device_marks) >= MIN_MARKS_FOR_BEST)
        if use_marks and len(device_marks):
            models[device] = fit_from_marks(device_marks, events)
        elif use_marks:
            skipped[device] = "no sync marks that name a learner with log events"
        else:
            to_scan.append(device)
    # a device without its own marks borrows a paired partner's model before any automatic scan
    relative = paired_relative_offsets(study)
    borrowed = borrowings(models, study, relative) if method != "auto" else {}
    for device, borrowing in borrowed.items():
        models[device] = borrowing.model
        skipped.pop(device, None)
    for device in to_scan:
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        if device in borrowed:
            continue
        if len(live):
            models[device] = scan_offset(_observable(live, study), events, list(study.scheme.dimension_names))
        else:
            skipped[device] = "no live observations to scan"
    return Alignment(models=dict(sorted(models.items())), read_report=report, skipped=skipped, borrowed=borrowed,
                     typed_differences=typed_difference_checks(study, relative))


@dataclass(frozen=True)
class Borrowing:
    """A device's model taken from its paired partner: whose, and through which signals."""

    model: ClockModel
    partner: str
    relative_offset_s: float  # this device minus the partner, at the partner's model reference
    marks_used: int
    pairing_ids: tuple[str, ...]

    def as_dict(self) -> dict:
        return {"from": self.partner, "relative_offset_s": round(self.relative_offset_s, 3),
                "signal_marks_used": self.marks_used, "pairing_ids": list(self.pairing_ids)}


def paired_relative_offsets(study: Study) -> pd.DataFrame:
    """``sync.clock_pairs.relative_offsets`` of every signal mark in the study's store."""
    with Store(study.store_path) as store:
        marks = store.sync_marks()
    marks = marks[marks["kind"].fillna("").ne("") & marks["pairing_id"].notna()]
    return relative_offsets(pd.DataFrame({
        "pairing_id": marks["pairing_id"].astype(str), "device": marks["device"].astype(str),
        "kind": marks["kind"].astype(str), "marked_ns": marks["marked_at"].astype("int64")}))


def borrowed_models(own: dict[str, ClockModel], study: Study) -> dict[str, ClockModel]:
    """Models for devices without one of their own, borrowed from a paired partner that has one.

    The partner's model is moved by the relative offset (and drift) read from the paired
    runs' signal marks; its uncertainty adds the signals' to the partner's.  Method
    "borrowed" ranks below the device's own marks (precedence: alignment's callers).
    """
    return {device: borrowing.model
            for device, borrowing in borrowings(own, study, paired_relative_offsets(study)).items()}


def borrowings(own: dict[str, ClockModel], study: Study, relative: pd.DataFrame) -> dict[str, Borrowing]:
    """The borrowed model of every device in ``relative`` lacking its own, with where it came from."""
    lenders = {device: model for device, model in own.items() if model.method not in ("borrowed", "identity")}
    found: dict[str, Borrowing] = {}
    for row in relative.to_dict("records"):
        for device, partner in ((row["device_a"], row["device_b"]), (row["device_b"], row["device_a"])):
            if device in own or partner not in lenders:
                continue
            borrowing = _borrow(device, lenders[partner], row)
            best = found.get(device)
            if best is None or _error(borrowing.model) < _error(best.model):
                found[device] = borrowing
    return dict(sorted(found.items()))


def _error(model: ClockModel) -> float:
    """The standard error a model's span carries (offset's when the span's is unknown);
    a hand-set offset is a person's decision and counts as exact."""
    span = model.span_standard_error_s
    if math.isfinite(span):
        return span
    if math.isnan(model.offset_standard_error_s) and model.method == "manual":
        return 0.0
    return model.offset_standard_error_s


def _borrow(device: str, lender: ClockModel, row: dict) -> Borrowing:
    """The lender's line composed with the relative line, re-expressed as one clock line."""
    reference = int(lender.reference_ns)
    hour = 3_600_000_000_000
    log_ns = np.array([reference, reference + hour], dtype=np.int64)
    mine = partner_time_ns(row, lender.device, lender.to_device_ns(log_ns))
    offsets = (mine - log_ns) / 1e9
    drift = (offsets[1] - offsets[0]) / (hour / 1e9) * 1e6
    relative_error = float(row["standard_error_s"])
    lender_error = _error(lender)
    lender_span = lender_error
    pairing_ids = tuple(str(row["pairing_ids"]).split(","))
    model = ClockModel(
        device=device, method="borrowed", offset_s=float(offsets[0]), drift_ppm=float(drift), reference_ns=reference,
        marks_used=int(row["marks_used"]),
        offset_standard_error_s=float(math.hypot(lender_error, relative_error)) if math.isfinite(lender_error) else math.nan,
        span_standard_error_s=float(math.hypot(lender_span, relative_error)) if math.isfinite(lender_span) else math.nan,
        warnings=(f"borrowed from {lender.device} ({lender.method}) through {int(row['marks_used'])} paired signal "
                  f"marks of run(s) {', '.join(pairing_ids)}",))
    relative = float(offsets[0] - lender.offset_s)
    return Borrowing(model=model, partner=lender.device, relative_offset_s=relative,
                     marks_used=int(row["marks_used"]), pairing_ids=pairing_ids)


TYPED_DIFFERENCE_TOLERANCE_S = 1.0  # a difference read off two screens by eye, to the second


def typed_difference_checks(study: Study, relative: pd.DataFrame) -> list[dict]:
    """Each typed clock difference (typed start) against what the runs' signal marks measured.

    One dict per session with a typed difference and a partner device in ``relative``:
    session_id, device, partner, typed_s, measured_s (partner minus this device at the
    session's start, NaN when no signal pairs the two), agrees.
    """
    with Store(study.store_path) as store:
        sessions = store.sessions()
    typed = sessions[sessions["typed_clock_difference_s"].notna() & sessions["pairing_id"].notna()]
    checks = []
    for session in typed.to_dict("records"):
        partners = sessions[(sessions["pairing_id"] == session["pairing_id"])
                            & (sessions["device"] != session["device"])]["device"].astype(str).unique()
        for partner in partners:
            device = str(session["device"])
            pair = relative[((relative["device_a"] == device) & (relative["device_b"] == partner))
                            | ((relative["device_a"] == partner) & (relative["device_b"] == device))]
            start = np.array([session["started_at"].value], dtype=np.int64)
            measured = float((partner_time_ns(pair.iloc[0], device, start)[0] - start[0]) / 1e9) if len(pair) else math.nan
            typed_s = float(session["typed_clock_difference_s"])
            checks.append({"session_id": str(session["session_id"]), "device": device, "partner": str(partner),
                           "typed_s": typed_s, "measured_s": None if math.isnan(measured) else round(measured, 3),
                           "agrees": None if math.isnan(measured)
                           else bool(abs(measured - typed_s) <= TYPED_DIFFERENCE_TOLERANCE_S)})
    return checks


def _observable(observations: pd.DataFrame, study: Study) -> pd.DataFrame:
    """Could-not-observe codes blanked: they say nothing about what the learner did."""
    observations = observations.copy()
    for dimension in study.scheme.dimensions:
        column = observations[dimension.name]
        observations[dimension.name] = column.where(column != dimension.could_not_observe)
    return observations


NO_LOGS_FOR_ALIGN = ("no logs declared; add a [[logs]] entry, "
                     "or give every device's offset with --set-offset DEVICE=SECONDS")


def read_study_logs(study: Study, if_missing: str = NO_LOGS_FOR_ALIGN) -> tuple[pd.DataFrame, ReadReport]:
    """The study's [[logs]] as one EVENTS table (sync/tables.py), learners checked against the roster.

    ``if_missing`` is what to tell the user when study.toml declares no logs.
    """
    if not study.logs:
        raise InputError(study.dir / "study.toml", "[[logs]]", if_missing)
    return read_logs(study.logs, known_log_ids=study.roster["log_id"].dropna().astype(str))


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
