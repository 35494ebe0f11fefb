"""Clock model from sync marks: moments a coder marked on the device clock while the
learner did something the log records.

1. Coarse model by voting (a Hough transform): every event of the marked learner within
   +-300 s of a mark is a candidate pairing, and each mark votes at most once per offset
   bin (a burst of events is one piece of evidence); for each drift on a grid (+-200 ppm, step
   2 ppm; quartz clocks stay well inside, common practice) each pairing votes for the
   offset it implies, and the (drift, offset) with most votes wins.  So a large offset or
   a long study does not pair marks with the wrong events.
2. Each mark is matched to its learner's nearest event under the current model, and a
   Theil-Sen line (scipy) of (device - event) against event time gives offset and drift.
   Matching and fitting are repeated with the fitted model.
3. Marks further than max(1 s, 5 robust SD) from the line are outliers: named, and left
   out of the final fit.
4. The standard errors come from a model of the matching itself: each kept mark was made
   at one of its learner's events within that limit, which one unknown, plus normal
   reaction noise (sync/clock_mark_errors.py: EM fit, Louis's observed information, a
   Working-Hotelling band over the device's observed span), widened for the Theil-Sen
   line's lower efficiency (THEIL_SEN_VARIANCE_RATIO).  Nearest-event residuals alone
   understate the error about twofold where events come closer together than the
   coder's reaction spread.  Drift makes the error grow away from the marks, which is
   why the gate of ``fieldmark align`` uses the span's.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import theilslopes

from sync.clock import ClockModel, MarkResidual
from sync.clock_mark_errors import fit_mark_line
from sync.event_table import learner_blocks
from sync.time_column import datetime_column_ns
from sync.robust_spread import robust_sd

SEARCH_RANGE_S = 300.0
VOTE_BIN_S = 1.0
VOTE_DRIFT_RANGE_PPM = 200.0
VOTE_DRIFT_STEP_PPM = 2.0
OUTLIER_FLOOR_S = 1.0
OUTLIER_ROBUST_SD = 5.0
MIN_DRIFT_SPAN_S = 600.0
MIN_DRIFT_MARKS = 3
ROUNDS = 3
# The Theil-Sen line's offset is a median (of residuals about its slope): for normal errors
# its variance is pi/2 times the mean's (asymptotic relative efficiency 2/pi, from memory);
# the slope loses less (about 0.91).  So the matching model's errors, which are those of its
# maximum-likelihood line, are widened by sqrt(pi/2) for the line reported.
THEIL_SEN_VARIANCE_RATIO = np.pi / 2


def fit_from_marks(marks: pd.DataFrame, events: pd.DataFrame,
                   span_ns: tuple[int, int] | None = None) -> ClockModel:
    """Clock model for ONE device from its sync marks and the EVENTS table.

    ``marks`` has the SYNC MARKS columns (observer_app/study/tables.py: mark_id, device,
    marked_at ...) plus ``log_id``, the marked learner's id in the log (the caller maps
    roster learner -> log_id).  Marks without a log_id, or whose learner has no events,
    are reported in the warnings and not used.  ``span_ns`` is the device's observed span
    (first and last instant, int64 UTC ns on the device clock) over which
    ``span_standard_error_s`` is stated; by default the marks' own span.  Raises
    ValueError when no mark is usable.
    """
    devices = marks["device"].unique()
    if len(devices) != 1:
        raise ValueError(f"fit_from_marks takes one device's marks, got {list(devices)}")
    blocks = learner_blocks(events)
    event_ns = events["time_ns"].to_numpy()
    log_ids = marks["log_id"].fillna("").astype(str)
    usable = marks[log_ids.isin(list(blocks))]
    warnings = []
    if len(usable) < len(marks):
        skipped = marks.loc[~log_ids.isin(list(blocks)), "mark_id"].astype(str).tolist()
        warnings.append(f"{len(skipped)} marks have no learner with log events and were not used "
                        f"({', '.join(skipped[:5])})")
    if usable.empty:
        raise ValueError("no sync mark names a learner with log events")
    device_ns = datetime_column_ns(usable["marked_at"])
    learners = usable["log_id"].astype(str).to_numpy()
    mark_ids = usable["mark_id"].astype(str).to_numpy()

    def nearest(log_guess: np.ndarray) -> np.ndarray:
        """Each mark's learner's event closest to its guessed log time; marks on the last axis."""
        guess = np.atleast_2d(log_guess)
        found = np.empty_like(guess)
        for learner in np.unique(learners):
            rows = np.flatnonzero(learners == learner)
            begin, stop = blocks[learner]
            times = event_ns[begin:stop]
            query = guess[:, rows]
            after = np.clip(np.searchsorted(times, query), 0, len(times) - 1)
            before = np.clip(after - 1, 0, len(times) - 1)
            closer_after = np.abs(times[after] - query) < np.abs(query - times[before])
            found[:, rows] = np.where(closer_after, times[after], times[before])
        return found.reshape(np.shape(log_guess))

    offset, drift, reference = _coarse_model(device_ns, learners, blocks, event_ns)
    model = ClockModel(device=str(devices[0]), method="marks", offset_s=offset, drift_ppm=drift,
                       reference_ns=reference - int(round(offset * 1e9)))
    keep = np.ones(len(device_ns), dtype=bool)
    for _ in range(ROUNDS):
        matched = nearest(model.to_log_ns(device_ns))
        model, residual = _fit(model, device_ns, matched, keep, warnings)
        keep = np.abs(residual) <= _outlier_limit(residual[keep])
        model, residual = _fit(model, device_ns, matched, keep, warnings)
    limit = _outlier_limit(residual[keep])
    span = np.array(span_ns if span_ns is not None else (device_ns.min(), device_ns.max()), dtype=np.int64)
    if keep.any():
        errors = _mark_errors(model, device_ns[keep], matched[keep], learners[keep], blocks, event_ns, limit,
                              _drift_estimable((matched[keep] - model.reference_ns) / 1e9),
                              robust_sd(residual[keep]), span)
    else:
        errors = (float("nan"), float("nan"))
    residuals = tuple(
        MarkResidual(mark_id=mark_ids[i], learner=learners[i], device_ns=int(device_ns[i]), event_ns=int(matched[i]),
                     residual_s=round(float(residual[i]), 6), outlier=not bool(keep[i]))
        for i in range(len(device_ns)))
    outliers = [r.mark_id for r in residuals if r.outlier]
    if outliers:
        warnings.append(f"{len(outliers)} outlying marks left out of the fit: {', '.join(outliers[:10])}")
    return ClockModel(
        device=model.device, method="marks", offset_s=model.offset_s, drift_ppm=model.drift_ppm,
        reference_ns=model.reference_ns, marks_used=int(keep.sum()),
        median_abs_residual_s=float(np.median(np.abs(residual))), confidence=float(keep.mean()),
        offset_standard_error_s=errors[0], span_standard_error_s=errors[1],
        warnings=tuple(dict.fromkeys(warnings)), residuals=residuals)


def _coarse_model(device_ns: np.ndarray, learners: np.ndarray, blocks: dict[str, tuple[int, int]],
                  event_ns: np.ndarray) -> tuple[float, float, int]:
    """(offset_s, drift_ppm, reference_ns) with the most votes from candidate pairings."""
    reference = int(np.median(device_ns))
    first, last = _event_ranges(learners, blocks, event_ns, device_ns, int(SEARCH_RANGE_S * 1e9))
    size = last - first
    index = np.repeat(first, size) + (np.arange(size.sum()) - np.repeat(np.cumsum(size) - size, size))
    gaps = (np.repeat(device_ns, size) - event_ns[index]) / 1e9
    since = (event_ns[index] - reference) / 1e9
    voters = np.repeat(np.arange(len(device_ns)), size)
    if gaps.size == 0:
        return 0.0, 0.0, reference
    drifts = np.arange(-VOTE_DRIFT_RANGE_PPM, VOTE_DRIFT_RANGE_PPM + VOTE_DRIFT_STEP_PPM / 2, VOTE_DRIFT_STEP_PPM)
    bins = int(2 * SEARCH_RANGE_S / VOTE_BIN_S) + 3
    best = (-1, 0.0, 0.0)
    for drift in drifts:
        implied = gaps - drift * 1e-6 * since
        index = np.floor((implied + SEARCH_RANGE_S) / VOTE_BIN_S).astype(np.int64) + 1
        pair_votes = _distinct_votes(voters, index, bins - 1)
        top = int(np.argmax(pair_votes))
        if pair_votes[top] > best[0]:
            best = (int(pair_votes[top]), float(top * VOTE_BIN_S - SEARCH_RANGE_S), float(drift))
    return best[1], best[2], reference


def _distinct_votes(voters: np.ndarray, index: np.ndarray, pairs: int) -> np.ndarray:
    """Votes per pair of neighbouring bins (pair p = bins p and p + 1), each mark counted
    once per pair however many of its learner's events fall there: a busy learner's burst
    of events is one piece of evidence, not many.

    Each mark's candidate events come in time order, so its bin index never rises
    (implied offset = device - event time); repeats are therefore neighbours and are
    dropped by comparing each entry with the one before, with no sort.
    """
    def first_of_runs(who: np.ndarray, where: np.ndarray) -> np.ndarray:
        return np.r_[True, (who[1:] != who[:-1]) | (where[1:] != where[:-1])] if len(who) else np.zeros(0, bool)

    keep = first_of_runs(voters, index)
    who, where = voters[keep], index[keep]
    # a mark with an event in bin b votes for pairs b - 1 and b: interleaved, still never rising
    who, where = np.repeat(who, 2), np.column_stack((where, where - 1)).ravel()
    keep = first_of_runs(who, where) & (where >= 0) & (where < pairs)
    return np.bincount(where[keep], minlength=pairs)


def _fit(model: ClockModel, device_ns: np.ndarray, matched: np.ndarray, keep: np.ndarray,
         warnings: list[str]) -> tuple[ClockModel, np.ndarray]:
    """Theil-Sen offset and drift through the kept marks; residuals for all marks (s)."""
    since = (matched - model.reference_ns) / 1e9
    gap = (device_ns - matched) / 1e9
    if _drift_estimable(since[keep]):
        slope = theilslopes(gap[keep], since[keep])[0]
        # The offset is the median residual about the Theil-Sen slope (scipy's own
        # intercept pairs median(y) with median(x), which need not be the same mark).
        intercept = float(np.median(gap[keep] - slope * since[keep]))
    else:
        slope, intercept = 0.0, float(np.median(gap[keep] if keep.any() else gap))
        warnings.append(f"drift not estimated (needs {MIN_DRIFT_MARKS} marks spread over "
                        f"{MIN_DRIFT_SPAN_S / 60:.0f} minutes); assumed 0 ppm")
    fitted = ClockModel(device=model.device, method="marks", offset_s=float(intercept),
                        drift_ppm=float(slope * 1e6), reference_ns=model.reference_ns)
    return fitted, gap - (intercept + slope * since)


def _drift_estimable(since_s: np.ndarray) -> bool:
    """Enough kept marks spread over enough time (s since the reference) to fit a drift."""
    return len(since_s) >= MIN_DRIFT_MARKS and float(np.ptp(since_s)) >= MIN_DRIFT_SPAN_S


def _mark_errors(model: ClockModel, device_ns: np.ndarray, matched: np.ndarray, learners: np.ndarray,
                 blocks: dict[str, tuple[int, int]], event_ns: np.ndarray, limit_s: float, with_drift: bool,
                 sigma_s: float, span_device_ns: np.ndarray) -> tuple[float, float]:
    """Step 4 of the module note for the kept marks: the (offset, span) standard errors of
    the Theil-Sen line ``model``.  Each mark's candidates are its learner's events
    within ``limit_s`` of where the current model puts it, and the event it was matched to."""
    first, last = _event_ranges(learners, blocks, event_ns, model.to_log_ns(device_ns), int(limit_s * 1e9))
    at, _ = _event_ranges(learners, blocks, event_ns, matched, 0)  # the matched event is always a candidate
    first, count = np.minimum(first, at), np.maximum(last, at + 1) - np.minimum(first, at)
    index = first[:, None] + np.arange(count.max())[None, :]
    candidate = np.arange(count.max())[None, :] < count[:, None]
    times = event_ns[np.where(candidate, index, first[:, None])]
    line = fit_mark_line((device_ns[:, None] - times) / 1e9, (times - model.reference_ns) / 1e9, candidate,
                         model.offset_s, model.drift_ppm * 1e-6 if with_drift else None, sigma_s,
                         (model.to_log_ns(span_device_ns) - model.reference_ns) / 1e9)
    widen = np.sqrt(THEIL_SEN_VARIANCE_RATIO)
    return line.offset_error_s * widen, line.span_error_s * widen


def _event_ranges(learners: np.ndarray, blocks: dict[str, tuple[int, int]], event_ns: np.ndarray,
                  centre_ns: np.ndarray, reach_ns: int) -> tuple[np.ndarray, np.ndarray]:
    """Per mark, [first, last) indices into ``event_ns`` of its learner's events within
    ``reach_ns`` of its ``centre_ns``, by np.searchsorted on that learner's sorted slice."""
    first, last = np.empty(len(centre_ns), np.int64), np.empty(len(centre_ns), np.int64)
    for learner in np.unique(learners):
        rows = np.flatnonzero(learners == learner)
        begin, stop = blocks[learner]
        times = event_ns[begin:stop]
        first[rows] = begin + np.searchsorted(times, centre_ns[rows] - reach_ns)
        last[rows] = begin + np.searchsorted(times, centre_ns[rows] + reach_ns, side="right")
    return first, last


def _outlier_limit(residual: np.ndarray) -> float:
    return max(OUTLIER_FLOOR_S, OUTLIER_ROBUST_SD * robust_sd(residual))
