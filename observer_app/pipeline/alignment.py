"""Aligning a study: every coder device's clock model against the study's logs, kept as
decisions.

The one place that decides which method a device gets when fitting:
  "marks": a fit from its sync marks (devices without usable marks are skipped);
  "auto":  the automatic scan of its live observations;
  "best":  marks when at least MIN_MARKS_FOR_BEST marks name learners with log events,
           otherwise the automatic scan.
Replay observations are left out of the scan (a replayed clip is coded against the log
itself, not a device's wall clock), and so are could-not-observe codes.  Marks are
fitted per device and per session; the sessions share one model only when their fits
agree (sync/clock_sessions.py).

And the one place that decides which stored model a clock uses (``stored_clock_models``).
The store keeps every model ever stored (append-only history, observer_app/study/tables.py
CLOCK HISTORY).  Precedence, per device: hand-set ("manual") > this device's sync marks
("marks") > borrowed from a paired partner ("borrowed") > automatic ("auto"); within a
method the newest by the time it was fitted, never by row order.  `align --refit DEVICE`
stores a row that ends the device's earlier decisions.  A plain align never replaces a
hand-set offset: it keeps it and says so.

The uncertainty gate: a fitted model (marks or auto) is stored only when its standard
error over the device's whole observed span (``span_standard_error_s``; the offset's
when that is unknown) is below a bound, DEFAULT_MAX_STANDARD_ERROR_S unless the user
states another; otherwise align refuses (nothing stored) unless the user accepts it.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from tqdm import tqdm

from observer_app.study.store import Store, now_utc
from observer_app.study.folder import Study
from sync.clock import ClockModel, manual_model
from sync.clock_marks import fit_from_marks
from sync.clock_scan import scan_offset
from sync.clock_sessions import clock_key, model_for, session_model, sessions_apart
from sync.errors import InputError
from sync.event_table import empty_events
from sync.logs import ReadReport, read_logs
from sync.time_column import datetime_column_ns

METHODS: tuple[str, ...] = ("best", "marks", "auto")
PRECEDENCE: tuple[str, ...] = ("manual", "marks", "borrowed", "auto")  # first wins
MIN_MARKS_FOR_BEST = 3
MIN_MARKS_PER_SESSION = 3
DEFAULT_MAX_STANDARD_ERROR_S = 2.0
DECISIONS: tuple[str, ...] = ("kept hand-set", "refitted", "stored", "refused", "borrowed", "skipped")


@dataclass(frozen=True)
class ClockDecision:
    """What align did with one device's clock and why (``decision`` is one of DECISIONS)."""

    device: str
    decision: str
    reason: str
    uncertain_accepted: bool = False

    def as_dict(self) -> dict:
        return {"decision": self.decision, "reason": self.reason, "uncertain_accepted": self.uncertain_accepted}


@dataclass
class Alignment:
    """The models per clock key (``device`` or ``device/session_id``) fitted or kept by this
    run, what reading the logs found, devices left out, and the decision per device."""

    models: dict[str, ClockModel]
    read_report: ReadReport
    skipped: dict[str, str] = field(default_factory=dict)
    decisions: dict[str, ClockDecision] = field(default_factory=dict)
    events: pd.DataFrame | None = None  # the EVENTS read for the fits; None when no fit needed the logs


def gate_error(model: ClockModel) -> float:
    """The standard error the uncertainty gate reads: over the span, else at the reference."""
    span = model.span_standard_error_s
    return span if math.isfinite(span) else model.offset_standard_error_s


def align_study(study: Study, method: str = "best", manual_offsets: dict[str, float] | None = None,
                progress: bool = False, logs: tuple[pd.DataFrame, ReadReport] | None = None, *,
                refit: tuple[str, ...] = (), max_standard_error_s: float = DEFAULT_MAX_STANDARD_ERROR_S,
                accept_uncertain: bool = False, command: str = "fieldmark align") -> Alignment:
    """Fit (or take by hand) a clock model per device and append each to the study's history.

    Devices whose model in effect is hand-set are kept, not refitted, unless named in
    ``refit``.  Raises InputError (nothing stored) when a fit is not below
    ``max_standard_error_s`` and ``accept_uncertain`` is false; the error's
    ``alignment`` attribute holds the decisions so a caller can still show them.
    """
    manual_offsets = manual_offsets or {}
    current = stored_clock_decisions(study)
    hand_set = {str(device) for device, method_ in zip(current["device"], current["method"]) if method_ == "manual"}
    with Store(study.store_path) as store:
        devices = sorted(set(store.sessions()["device"].astype(str)))
    unknown = sorted(set(refit) - set(devices))
    if unknown:
        raise InputError(None, "--refit", f"no sessions from device {unknown[0]!r} in the store; "
                         f"devices are {', '.join(devices) or 'none yet'}")
    kept = sorted(hand_set - set(refit) - set(manual_offsets))
    alignment = fit_clock_models(study, method, manual_offsets, progress, logs, leave_out=kept)
    decisions: dict[str, ClockDecision] = {}
    for device in kept:
        decisions[device] = ClockDecision(device, "kept hand-set",
                                          f"a hand-set offset is a person's decision; pass --refit {device} to replace it")
    refused: list[tuple[str, str, float]] = []
    for key, model in alignment.models.items():
        device = model.device
        if model.method == "manual":
            decisions[device] = ClockDecision(device, "refitted" if device in refit else "stored",
                                              "set by hand with --set-offset")
            continue
        error = gate_error(model)
        uncertain = not (error < max_standard_error_s)
        if uncertain and not accept_uncertain:
            refused.append((key, model.method, error))
        verb = "refitted" if device in refit else "stored"
        reason = _evidence(model) + (f"; above the bound of {max_standard_error_s:g} s, accepted with "
                                     "--accept-uncertain" if uncertain else "")
        if device not in decisions or decisions[device].decision != "refused":
            decisions[device] = ClockDecision(device, "refused" if uncertain and not accept_uncertain else verb,
                                              reason, uncertain_accepted=uncertain and accept_uncertain)
    for device, why in alignment.skipped.items():
        decisions.setdefault(device, ClockDecision(device, "skipped", why))
    alignment.decisions = dict(sorted(decisions.items()))
    if refused:
        key, method_, error = refused[0]
        device = alignment.models[key].device
        what = "automatic fit" if method_ == "auto" else "sync-mark fit"
        shown = "unknown" if not math.isfinite(error) else f"{error:.2f} s"
        problem = InputError(None, f"device {key}",
                             f"the {what}'s standard error over its observed span is {shown}, not below the bound of "
                             f"{max_standard_error_s:g} s; record sync marks, set the offset with --set-offset "
                             f"{device}=SECONDS, or pass --accept-uncertain to store it anyway")
        problem.alignment = alignment  # type: ignore[attr-defined]
        raise problem
    rows = [dict(device=model.device, model_key=key, model_json=model.to_json(), method=model.method,
                 command=command, evidence=_evidence(model),
                 replaces_earlier=model.device in refit,
                 uncertain_accepted=decisions[model.device].uncertain_accepted)
            for key, model in alignment.models.items()]
    if rows:
        with Store(study.store_path) as store:
            store.record_clock_models(rows, now_utc())
    kept_models = {key: model for key, model in stored_clock_models(study).items() if key.split("/")[0] in kept}
    alignment.models = dict(sorted({**alignment.models, **kept_models}.items()))
    return alignment


def fit_clock_models(study: Study, method: str = "best", manual_offsets: dict[str, float] | None = None,
                     progress: bool = False, logs: tuple[pd.DataFrame, ReadReport] | None = None,
                     leave_out: list[str] | tuple[str, ...] = ()) -> Alignment:
    """A clock model per clock key, without recording it; ``logs`` saves a second read of
    the logs; devices in ``leave_out`` are not fitted (their hand-set offset is kept)."""
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
    to_fit = [device for device in devices if device not in manual_offsets and device not in leave_out]
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
    for device in tqdm(to_fit, desc="aligning devices", unit="device", disable=None if progress else True):
        device_marks = marks[(marks["device"] == device) & marks["log_id"].isin(known)]
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        use_marks = method == "marks" or (method == "best" and len(device_marks) >= MIN_MARKS_FOR_BEST)
        if use_marks and len(device_marks):
            models.update(_fit_marks_by_session(device_marks, events, live))
        elif use_marks:
            skipped[device] = "no sync marks that name a learner with log events"
        elif len(live):
            models[device] = scan_offset(_observable(live, study), events, list(study.scheme.dimension_names))
        else:
            skipped[device] = "no live observations to scan"
    return Alignment(models=dict(sorted(models.items())), read_report=report, skipped=skipped,
                     events=events if to_fit else None)


def _fit_marks_by_session(marks: pd.DataFrame, events: pd.DataFrame, live: pd.DataFrame) -> dict[str, ClockModel]:
    """One device's marks fitted together and per session (sessions with MIN_MARKS_PER_SESSION
    usable marks); sessions whose clock was corrected keep their own model (sync/clock_sessions.py)
    and the device's model is refitted from the rest."""
    combined = fit_from_marks(marks, events, _observed_span(live))
    per_session = {
        str(session_id): fit_from_marks(group, events, _observed_span(live[live["session_id"] == session_id]))
        for session_id, group in marks.groupby("session_id", sort=True)
        if len(group) >= MIN_MARKS_PER_SESSION
    }
    apart = sessions_apart(combined, per_session)
    if not apart:
        return {combined.device: combined}
    sessions = set(marks["session_id"].astype(str)) | set(live["session_id"].astype(str))
    models = {clock_key(combined.device, session_id): session_model(per_session[session_id], len(sessions))
              for session_id in apart}
    rest = marks[~marks["session_id"].astype(str).isin(apart)]
    if len(rest):
        models[combined.device] = fit_from_marks(rest, events,
                                                 _observed_span(live[~live["session_id"].astype(str).isin(apart)]))
    return models


def _observed_span(live: pd.DataFrame) -> tuple[int, int] | None:
    """First window start and last window end of live observations (device clock, ns), or None."""
    if live.empty:
        return None
    start, end = datetime_column_ns(live["window_start"]), datetime_column_ns(live["window_end"])
    return int(start.min()), int(end.max())


def _evidence(model: ClockModel) -> str:
    """One line: what a fitted model rests on."""
    def seconds(value: float) -> str:
        return f"{value:.2f} s" if math.isfinite(value) else "unknown"

    errors = (f"standard error {seconds(model.offset_standard_error_s)} at the reference, "
              f"{seconds(model.span_standard_error_s)} over the observed span")
    if model.method == "marks":
        return f"{model.marks_used} sync marks ({len(model.outlying_marks)} outlying), {errors}"
    if model.method == "auto":
        shown = f"{model.confidence:.2f}" if math.isfinite(model.confidence) else "unknown"
        return f"automatic scan of live windows (confidence {shown}), {errors}"
    return "set by hand" if model.method == "manual" else model.method


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


def stored_clock_decisions(study: Study) -> pd.DataFrame:
    """The rows of the clock history in effect (CLOCK HISTORY columns, observer_app/study/
    tables.py), one per clock key, by the precedence of the module note."""
    with Store(study.store_path) as store:
        history = store.clock_models()
    return decisions_in_effect(history)


def decisions_in_effect(history: pd.DataFrame) -> pd.DataFrame:
    """Per device: the rows at or after its last refit; the best-ranked method among them;
    within it the newest fitted batch (one align run stores a device's rows together)."""
    if history.empty:
        return history.assign(rank=pd.Series(dtype="int64"))
    rows = history.copy()
    written = rows["model_json"].map(lambda text: json.loads(text)["method"])
    rows["method"] = rows["method"].where(rows["method"].fillna("") != "", written)
    fitted_ns = datetime_column_ns(rows["at"])
    devices = rows["device"].astype(str).to_numpy()
    refit = rows["replaces_earlier"].to_numpy(dtype=bool)
    last_refit = {device: fitted_ns[refit & (devices == device)].max() for device in set(devices[refit])}
    since = np.array([last_refit.get(device, np.iinfo(np.int64).min) for device in devices], dtype=np.int64)
    rows = rows[fitted_ns >= since]
    rows = rows.assign(rank=rows["method"].map({method: rank for rank, method in enumerate(PRECEDENCE)}))
    rows = rows[rows["rank"].notna()]
    best = rows.sort_values(["device", "rank", "at"], ascending=[True, True, False]).drop_duplicates("device")
    chosen = rows.merge(best[["device", "rank", "at"]], on=["device", "rank", "at"])
    return chosen.drop_duplicates("model_key", keep="last").sort_values("model_key").reset_index(drop=True)


def stored_clock_models(study: Study) -> dict[str, ClockModel]:
    """The model in effect per clock key (``device`` or ``device/session_id``): what
    everything downstream uses.  Precedence in the module note."""
    current = stored_clock_decisions(study)
    return {str(key): ClockModel.from_json(text) for key, text in zip(current["model_key"], current["model_json"])}


def require_clock_models(study: Study, observations: pd.DataFrame, models: dict[str, ClockModel]) -> None:
    """InputError naming the first live device (or session) without a clock model: no
    device's time is taken as log time without a decision.  Replay needs none."""
    live = observations[observations["mode"].astype(str) == "live"]
    pairs = live[["device", "session_id"]].astype(str).drop_duplicates().sort_values(["device", "session_id"])
    for device, session_id in zip(pairs["device"], pairs["session_id"]):
        if model_for(models, device, session_id) is None:
            split = any(key.startswith(f"{device}/") for key in models)
            what = f"device {device!r} session {session_id!r}" if split else f"device {device!r}"
            raise InputError(study.store_path, what, "has no clock model; run `fieldmark align STUDY` (sync marks or "
                             f"the automatic fit), or `fieldmark align STUDY --set-offset {device}=0` to say its clock "
                             "was synchronised with the log server")


def clock_reference_ns(study: Study) -> int:
    """The one instant every shown offset is stated at: the start of the hour in which the
    study's first live session began (its first session when none is live; 0 when none)."""
    with Store(study.store_path) as store:
        sessions = store.sessions()
    live = sessions[sessions["mode"] == "live"]
    starts = (live if len(live) else sessions)["started_at"].dropna()
    if starts.empty:
        return 0
    return int(starts.min().floor("h").value)


def reference_text(reference_ns: int) -> str:
    """ISO 8601 UTC text of a reference instant, e.g. 2026-03-02T09:00:00Z."""
    return pd.Timestamp(reference_ns, tz="UTC").strftime("%Y-%m-%dT%H:%M:%SZ")


def model_summary(model: ClockModel) -> dict:
    """The figures align reports per device, JSON-ready (NaN -> null)."""
    def number(value: float, digits: int) -> float | None:
        return None if value is None or not math.isfinite(value) else round(float(value), digits)

    return {
        "method": model.method, "offset_s": number(model.offset_s, 3), "drift_ppm": number(model.drift_ppm, 2),
        "reference_ns": model.reference_ns, "marks_used": model.marks_used,
        "median_abs_residual_s": number(model.median_abs_residual_s, 3), "confidence": number(model.confidence, 3),
        "offset_standard_error_s": number(model.offset_standard_error_s, 3),
        "span_standard_error_s": number(model.span_standard_error_s, 3),
        "outlying_marks": model.outlying_marks, "warnings": list(model.warnings),
    }
