"""Aligning a study: every coder device's clock model against the study's logs, kept as
decisions.

The one place that decides which method a device gets when fitting:
  "marks": a fit from its sync marks (devices without usable marks are skipped);
  "auto":  the automatic scan of its live observations;
  "best":  marks when at least MIN_MARKS_FOR_BEST marks name learners with log events,
           otherwise the automatic scan.
A device without sync marks of its own borrows its paired partner's model, moved by the
relative offset read from the runs' signal marks (``borrowed_models``), before any
automatic scan.  Replay observations are left out of the scan (a replayed clip is coded
against the log itself, not a device's wall clock), and so are could-not-observe codes.  Marks are
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

from collections.abc import Iterable, Mapping

import json
import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from tqdm import tqdm

from observer_app.study.store import Store, now_utc
from observer_app.study.folder import Study
from observer_app.study.roster import shared_log_id_problem
from sync.clock import ClockModel, manual_model
from sync.clock_pairs import partner_time_ns, relative_offsets
from sync.clock_gross import gross_mistake
from sync.clock_marks import fit_from_marks
from sync.clock_scan import scan_offset
from sync.clock_sessions import clock_key, model_for, session_model, sessions_apart
from sync.errors import InputError
from sync.event_table import empty_events
from sync.log_cache import LogCache
from sync.logs import ReadReport, cached_learner_blocks, fill_log_cache, read_logs
from sync.sorted_parquet import LearnerBlocks
from sync.time_column import datetime_column_ns
from sync.json_numbers import finite_or_none

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
    second_opinion: dict | None = None  # hand-set only: the automatic scan, when sure and far off (see below)

    def as_dict(self) -> dict:
        return {"decision": self.decision, "reason": self.reason, "uncertain_accepted": self.uncertain_accepted,
                "second_opinion": self.second_opinion}


@dataclass
class Alignment:
    """The models per clock key (``device`` or ``device/session_id``) fitted or kept by this
    run, what reading the logs found, devices left out, and the decision per device."""

    models: dict[str, ClockModel]
    read_report: ReadReport
    skipped: dict[str, str] = field(default_factory=dict)
    decisions: dict[str, ClockDecision] = field(default_factory=dict)
    events: pd.DataFrame | None = None  # the EVENTS read for the fits; None when no fit needed the logs
    borrowed: dict[str, "Borrowing"] = field(default_factory=dict)
    typed_differences: list[dict] = field(default_factory=list)


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
    accepted: set[str] = set()
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
        elif uncertain:
            accepted.add(key)
        verb = "refitted" if device in refit else "borrowed" if model.method == "borrowed" else "stored"
        reason = _evidence(model) + (f"; above the bound of {max_standard_error_s:g} s, accepted with "
                                     "--accept-uncertain" if uncertain else "")
        earlier = decisions.get(device)
        if earlier is not None:  # a device whose sessions got their own models: one reason per clock
            reason = f"{earlier.reason} | {key}: {reason}"
        elif key != device:
            reason = f"{key}: {reason}"
        refused_here = uncertain and not accept_uncertain
        decisions[device] = ClockDecision(
            device, "refused" if refused_here or (earlier and earlier.decision == "refused") else verb, reason,
            uncertain_accepted=(uncertain and accept_uncertain) or bool(earlier and earlier.uncertain_accepted))
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
                 replaces_earlier=model.device in refit, uncertain_accepted=key in accepted)
            for key, model in alignment.models.items()]
    if rows:
        with Store(study.store_path) as store:
            store.record_clock_models(rows, now_utc())
    in_effect = stored_clock_decisions(study)
    for device, method_, fitted in zip(in_effect["device"].astype(str), in_effect["method"], in_effect["at"]):
        decision = alignment.decisions.get(device)
        stored_method = next((m.method for m in alignment.models.values() if m.device == device), None)
        if decision and decision.decision in ("stored", "refitted") and stored_method not in (None, method_):
            alignment.decisions[device] = ClockDecision(
                device, decision.decision, f"{decision.reason}; the {method_} model fitted {fitted:%Y-%m-%dT%H:%M:%SZ} "
                "ranks higher and stays in effect", decision.uncertain_accepted)
    kept_models = {key: model for key, model in stored_clock_models(study).items() if model.device in kept}
    alignment.models = dict(sorted({**alignment.models, **kept_models}.items()))
    events = logs[0] if logs is not None else alignment.events
    if events is not None:
        hand_models = {model.device: model for model in alignment.models.values() if model.method == "manual"}
        for device, opinion in second_opinions(study, hand_models, events, max_standard_error_s).items():
            alignment.decisions[device] = replace(alignment.decisions[device], second_opinion=opinion)
    return alignment


SECOND_OPINION_MIN_S = 5.0
SECOND_OPINION_STANDARD_ERRORS = 5.0


def second_opinions(study: Study, hand_models: dict[str, ClockModel], events: pd.DataFrame,
                    max_standard_error_s: float) -> dict[str, dict]:
    """Per hand-set device: the automatic scan's offset, when the scan is sure and disagrees.

    A hand-set offset is a person's decision and is never replaced; but a typed offset can be
    wrong (a sign, an hour, the other laptop).  So the scan looks at the same device: when its
    standard error passes the uncertainty gate and its offset lies more than
    SECOND_OPINION_STANDARD_ERRORS standard errors and SECOND_OPINION_MIN_S seconds from the
    hand-set one (compared at the middle of the device's observed span), align says so.
    """
    if not hand_models or events.empty:
        return {}
    with Store(study.store_path) as store:
        observations = _with_log_ids(store.observations(study.scheme.dimension_names), study)
    opinions = {}
    for device, hand in hand_models.items():
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        span = _observed_span(live)
        if span is None:
            continue
        scan = scan_offset(_observable(live, study), events, list(study.scheme.dimension_names))
        error = gate_error(scan)
        if not error < max_standard_error_s:
            continue
        middle = np.array([(span[0] + span[1]) // 2], dtype=np.int64)
        difference_s = float(hand.to_log_ns(middle)[0] - scan.to_log_ns(middle)[0]) / 1e9  # scan minus hand offset
        if abs(difference_s) >= max(SECOND_OPINION_MIN_S, SECOND_OPINION_STANDARD_ERRORS * error):
            opinions[device] = {"scan_offset_s": hand.offset_s + difference_s, "standard_error_s": error,
                                "difference_s": difference_s, "looks_like": gross_mistake(difference_s)}
    return opinions


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
    marks = marks[marks["kind"].fillna("") == ""]  # signal marks match the partner's, not the log
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
        shared = shared_log_id_problem(study.roster, observations["learner"])
        if shared:  # a fit would read two learners' codes against one learner's events
            raise InputError(study.dir / "roster.csv", "column log_id", shared)
        events, report = logs if logs is not None else read_study_logs(study, only_log_ids=clock_log_ids(study))
    observations, marks = _with_log_ids(observations, study), _with_log_ids(marks, study)
    known = set(events["learner"].cat.categories.astype(str))
    models = {device: manual_model(device, offset) for device, offset in manual_offsets.items()}
    skipped: dict[str, str] = {}
    to_scan = []
    for device in tqdm(to_fit, desc="aligning devices", unit="device", disable=None if progress else True):
        device_marks = marks[(marks["device"] == device) & marks["log_id"].isin(known)]
        live = observations[(observations["device"] == device) & (observations["mode"] == "live")]
        use_marks = method == "marks" or (method == "best" and len(device_marks) >= MIN_MARKS_FOR_BEST)
        if use_marks and len(device_marks):
            models.update(_fit_marks_by_session(device_marks, events, live))
        elif use_marks:
            skipped[device] = "no sync marks that name a learner with log events"
        else:
            to_scan.append(device)
    # a device without marks of its own borrows a paired partner's model before any automatic scan;
    # partners whose hand-set offset is kept (leave_out) lend theirs too
    relative = paired_relative_offsets(study)
    kept = {key: model for key, model in stored_clock_models(study).items() if key in leave_out} if leave_out else {}
    borrowed = borrowings({**kept, **models}, study, relative) if method != "auto" else {}
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
                     typed_differences=typed_difference_checks(study, relative), events=events if to_fit else None)


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
    lenders = {key: model for key, model in own.items()  # device-wide models only, not per-session ones
               if "/" not in key and model.method not in ("borrowed", "identity")}
    owners = {model.device for model in own.values()}
    found: dict[str, Borrowing] = {}
    for row in relative.to_dict("records"):
        for device, partner in ((row["device_a"], row["device_b"]), (row["device_b"], row["device_a"])):
            if device in owners or partner not in lenders:
                continue
            borrowing = _borrow(device, lenders[partner], row)
            best = found.get(device)
            if best is None or _error(borrowing.model) < _error(best.model):
                found[device] = borrowing
    return dict(sorted(found.items()))


def _error(model: ClockModel) -> float:
    """The gate's standard error of a lender; a hand-set offset is a person's decision and counts as exact."""
    error = gate_error(model)
    return 0.0 if math.isnan(error) and model.method == "manual" else error


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
    if model.method == "borrowed":
        return f"{model.warnings[0] if model.warnings else 'borrowed from a paired partner'}, {errors}"
    return "set by hand" if model.method == "manual" else model.method


def _with_log_ids(frame: pd.DataFrame, study: Study) -> pd.DataFrame:
    """``frame`` with a log_id column: its learner's roster log_id ("" when none)."""
    log_ids = dict(zip(study.roster["learner"].astype(str), study.roster["log_id"].astype(str)))
    return frame.assign(log_id=frame["learner"].astype(str).map(log_ids).fillna(""))


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
                    only_log_ids: Iterable[str] | None = None,
                    digests: Mapping[str, str] | None = None,
                    whole_when_missing: bool = True) -> tuple[pd.DataFrame, ReadReport]:
    """The study's [[logs]] as one EVENTS table (sync/tables.py), learners checked against the roster.

    ``if_missing`` is what to tell the user when study.toml declares no logs;
    ``only_log_ids`` keeps just those learners' (whole) logs, filtered while reading.  When
    one of them has no events the logs are read whole after all (unless
    ``whole_when_missing`` is False): the coverage check can then show the ids the logs do
    use, and every row is checked as without the filter.
    ``digests``: the log files' SHA-256 when this run already hashed them.
    """
    if not study.logs:
        raise InputError(study.dir / "study.toml", "[[logs]]", if_missing)
    known = dict(digests or {})

    def read(only: Iterable[str] | None) -> tuple[pd.DataFrame, ReadReport]:
        events, report = read_logs(study.logs, known_log_ids=study.roster["log_id"].dropna().astype(str),
                                   only_log_ids=only, cache_dir=study.dir / PARSED_LOGS_DIR, digests=known)
        known.update(report.digests)
        return events, report

    if only_log_ids is None:
        return _forgetting_removed_logs(study, *read(None))
    wanted = set(map(str, only_log_ids))
    events, report = read(wanted)
    if whole_when_missing and not wanted <= set(events["learner"].astype(str).unique()):
        events, report = read(None)
    return _forgetting_removed_logs(study, events, report)


def roster_logs(study: Study) -> pd.DataFrame:
    """The events of the roster's learners only (their whole logs): what replay can cut clips
    from, without a platform's other learners (a dataset of millions of events)."""
    return read_study_logs(study, only_log_ids=observed_log_ids(study, study.roster["learner"]),
                           whole_when_missing=False)[0]


def _forgetting_removed_logs(study: Study, events, report: ReadReport):
    """(events, report), once the parsed-log cache has dropped every file no longer among the
    study's logs (after a successful read, which found them all)."""
    LogCache(study.dir / PARSED_LOGS_DIR).forget_all_but([path for spec in study.logs for path in spec.files()])
    return events, report


def stream_study_logs(study: Study, if_missing: str,
                      only_log_ids: Iterable[str]) -> tuple[pd.DataFrame | LearnerBlocks, ReadReport]:
    """``read_study_logs``, as blocks of whole learners (sync.logs.cached_learner_blocks) when
    the logs are CSV or Parquet and every wanted id has events: files the parsed-log cache
    lacks are parsed into it first, one at a time, so no log is loaded whole.  Otherwise
    the EVENTS table of ``read_study_logs``.  The report is the same either way."""
    if not study.logs:
        raise InputError(study.dir / "study.toml", "[[logs]]", if_missing)
    wanted = set(map(str, only_log_ids))
    known, cache = study.roster["log_id"].dropna().astype(str), study.dir / PARSED_LOGS_DIR
    blocks, report = cached_learner_blocks(study.logs, known, wanted, cache)
    if blocks is None and fill_log_cache(study.logs, wanted, cache, report.digests):
        blocks, report = cached_learner_blocks(study.logs, known, wanted, cache, report.digests)
    if blocks is not None and wanted <= blocks.learners:
        return _forgetting_removed_logs(study, blocks, report)
    # blocks that lack a wanted id: the filtered read would lack it too and read everything after
    return read_study_logs(study, if_missing, None if blocks is not None else wanted, digests=report.digests)


def observed_log_ids(study: Study, learners: Iterable[str]) -> list[str]:
    """The roster's log ids of ``learners`` (roster learner ids), sorted: whose logs a verb reads."""
    roster = study.roster.dropna(subset=["log_id"])
    return sorted(set(roster.loc[roster["learner"].astype(str).isin(set(map(str, learners))), "log_id"].astype(str)))


def clock_log_ids(study: Study) -> list[str]:
    """The log ids the clock fits can use: learners observed or named by a sync mark
    (the fits and the scan search only those learners' events)."""
    with Store(study.store_path) as store:
        learners = set(store.observations(study.scheme.dimension_names)["learner"].astype(str))
        learners |= set(store.sync_marks()["learner"].dropna().astype(str))
    return observed_log_ids(study, learners)


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
    return models_in_effect(stored_clock_decisions(study))


def models_in_effect(decisions: pd.DataFrame) -> dict[str, ClockModel]:
    """The clock models of decisions already read (``stored_clock_decisions``), by clock key."""
    return {str(key): ClockModel.from_json(text) for key, text in zip(decisions["model_key"], decisions["model_json"])}


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
    return {
        "method": model.method, "offset_s": finite_or_none(model.offset_s, 3),
        "drift_ppm": finite_or_none(model.drift_ppm, 2),
        "reference_ns": model.reference_ns, "marks_used": model.marks_used,
        "median_abs_residual_s": finite_or_none(model.median_abs_residual_s, 3),
        "confidence": finite_or_none(model.confidence, 3),
        "offset_standard_error_s": finite_or_none(model.offset_standard_error_s, 3),
        "span_standard_error_s": finite_or_none(model.span_standard_error_s, 3),
        "outlying_marks": model.outlying_marks, "warnings": list(model.warnings),
    }
