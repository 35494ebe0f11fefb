"""The automatic clock scan's fine stage: the offset under which each window's code names
the state the learner's log shows at the window's middle.

The coarse scan (sync/clock_scan.py) treats a code as a rate over the whole window, but a
coder codes what filled MOST of the window, so a window whose state changed part-way is
scored as if the change were not there, and the curve is a broad hump a few seconds
wide.  The information about the offset sits exactly in those changes.  So here each
learner's log around each window is read on its own: a hidden-state (Markov) chain over
the window's codes, one Poisson event rate per code (measured at the coarse offset),
gives per half second the probability of each code given the events before and after
(forward-backward).  The state at a window's middle is the one that filled most of it
unless it changed twice inside, so the score of offset o is

    sum over windows and dimensions of log(CODE_ERROR + (1 - CODE_ERROR) * P(code at middle - o))

-- the log-likelihood of the codes when a coder reports the state at the middle, or
any code by mistake.  The probabilities are computed once per window on a neighbourhood
of CONTEXT_S either side of where the coarse offset puts its middle; each offset then
only reads them (linear interpolation between bins), vectorised over all offsets, and
each window's term is kept so any set of windows (a session, a split sample) is scored
by a sum.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import chi2

BIN_S = 0.5
CONTEXT_S = 80.0         # log read either side of a window's middle: the fine range plus about a minute of lead-in
STATE_SECONDS = 60.0     # typical time in one state before a change (common practice: classroom states last minutes)
CODE_ERROR = 0.2         # chance a code is not the state at the middle (coder error, two changes in a window)
RATE_FLOOR_SHARE = 0.01  # a code with no events in its windows still gets 1% of the overall rate
ROWS_PER_BLOCK = 5000    # windows per pass, so the arrays stay a few tens of megabytes


@dataclass(frozen=True)
class MiddleStates:
    """Per dimension, per window: the probability of the window's own code at each bin of
    its neighbourhood (NaN rows for windows not coded in that dimension)."""

    first_ns: np.ndarray                # (windows,) log time where each neighbourhood's first bin starts
    probability: tuple[np.ndarray, ...]  # per dimension, (windows x bins)

    def window_scores(self, offsets_s: np.ndarray, middle_ns: np.ndarray,
                      shift_ns: np.ndarray | int = 0) -> np.ndarray:
        """(windows x offsets) each window's term of the log-likelihood above, summed over
        dimensions, for windows whose middles (device clock) are ``middle_ns`` moved by
        ``shift_ns``; the score of a set of windows is the sum of their rows.  Offsets must
        stay within CONTEXT_S of the coarse offset the neighbourhoods were cut at."""
        windows = len(middle_ns)
        bins = self.probability[0].shape[1] if self.probability else 0
        scores = np.zeros((windows, len(offsets_s)), dtype=np.float32)
        offsets_ns = np.round(np.asarray(offsets_s) * 1e9).astype(np.int64)
        shift = np.broadcast_to(np.asarray(shift_ns, dtype=np.int64), (windows,))
        for begin in range(0, windows, ROWS_PER_BLOCK):
            rows = np.arange(begin, min(begin + ROWS_PER_BLOCK, windows))
            # Position of each (window, offset) middle in bins from its neighbourhood's
            # start, measured to bin centres.
            log_ns = (middle_ns[rows] - shift[rows] - self.first_ns[rows])[:, None] - offsets_ns[None, :]
            position = np.clip(log_ns / (BIN_S * 1e9) - 0.5, 0.0, bins - 1.0)
            low = np.floor(position).astype(np.int64)
            weight = position - low
            high = np.minimum(low + 1, bins - 1)
            for probability in self.probability:
                chosen = probability[rows]
                coded = ~np.isnan(chosen[:, 0])
                index = np.arange(len(rows))[:, None]
                at = (1.0 - weight) * chosen[index, low] + weight * chosen[index, high]
                term = np.log(CODE_ERROR + (1.0 - CODE_ERROR) * at)
                scores[rows[coded]] += term[coded].astype(np.float32)
        return scores


def middle_states(event_ns: np.ndarray, blocks: dict[str, tuple[int, int]], learners: np.ndarray,
                  middle_ns: np.ndarray, labels: np.ndarray, sizes: list[int],
                  rates: list[np.ndarray]) -> MiddleStates:
    """Code probabilities around every window (see the module docstring).

    ``middle_ns``: each window's middle on the log clock at the coarse offset; ``labels``
    (windows x dimensions) code numbers, -1 = not coded, ``sizes[d]`` codes in dimension
    d; ``rates[d]`` events per second under each code of dimension d.
    """
    bins = int(round(2 * CONTEXT_S / BIN_S))
    bin_ns = int(round(BIN_S * 1e9))
    first = middle_ns - bins // 2 * bin_ns
    counts = _bin_counts(event_ns, blocks, np.asarray(learners).astype(str), first, bins, bin_ns)
    probabilities = []
    for dimension, size in enumerate(sizes):
        code = labels[:, dimension]
        result = np.full((len(middle_ns), bins), np.nan)
        coded = np.flatnonzero(code >= 0)
        mean_rate = float(np.mean(rates[dimension])) if len(rates[dimension]) else 0.0
        rate = np.maximum(rates[dimension], RATE_FLOOR_SHARE * max(mean_rate, 1e-9))
        for begin in range(0, len(coded), ROWS_PER_BLOCK):
            rows = coded[begin:begin + ROWS_PER_BLOCK]
            posterior = _forward_backward(counts[rows], rate * BIN_S, BIN_S / STATE_SECONDS)
            result[rows] = posterior[np.arange(len(rows)), :, code[rows]]
        probabilities.append(result)
    return MiddleStates(first_ns=first, probability=tuple(probabilities))


def _bin_counts(event_ns: np.ndarray, blocks: dict[str, tuple[int, int]], learners: np.ndarray,
                first_ns: np.ndarray, bins: int, bin_ns: int) -> np.ndarray:
    """(windows x bins) events of each window's learner per bin, by np.searchsorted on
    that learner's slice of the sorted event times."""
    counts = np.zeros((len(first_ns), bins), dtype=np.int64)
    edges_from_first = np.arange(bins + 1, dtype=np.int64) * bin_ns
    for learner in np.unique(learners):
        if learner not in blocks:
            continue
        rows = np.flatnonzero(learners == learner)
        begin, stop = blocks[learner]
        edges = first_ns[rows][:, None] + edges_from_first[None, :]
        counts[rows] = np.diff(np.searchsorted(event_ns[begin:stop], edges, side="left"), axis=1)
    return counts


def _forward_backward(counts: np.ndarray, expected: np.ndarray, switch: float) -> np.ndarray:
    """(rows x bins x codes) posterior code probabilities of a Markov chain that leaves its
    code with probability ``switch`` per bin (to any other alike), Poisson counts with
    mean ``expected[code]`` per bin, starting from equal odds.  Scaled at every step; the
    arrays are laid out bin-major so each step reads one contiguous slice."""
    rows, bins = counts.shape
    codes = len(expected)
    if codes < 2:
        return np.ones((rows, bins, codes))
    by_bin = np.ascontiguousarray(counts.T, dtype=np.float32)
    rate = np.asarray(expected, dtype=np.float32)
    log_emission = by_bin[:, :, None] * np.log(rate)[None, None, :] - rate[None, None, :]
    emission = np.exp(log_emission - log_emission.max(axis=2, keepdims=True))  # float32 halves memory traffic
    move = switch / (codes - 1)
    keep = 1.0 - switch - move  # p(next) = keep * p + move * sum(p), as sum(p) = 1 after scaling
    forward = np.empty((bins, rows, codes), dtype=np.float32)
    current = emission[0] / emission[0].sum(axis=1, keepdims=True)
    forward[0] = current
    for step in range(1, bins):
        current = (np.float32(keep) * current + np.float32(move)) * emission[step]
        current /= current.sum(axis=1, keepdims=True)
        forward[step] = current
    backward = np.ones((rows, codes), dtype=np.float32)
    for step in range(bins - 1, -1, -1):
        joint = forward[step] * backward
        forward[step] = joint / joint.sum(axis=1, keepdims=True)  # now the posterior
        carried = emission[step] * backward
        backward = np.float32(keep) * carried + np.float32(move) * carried.sum(axis=1, keepdims=True)
        backward /= backward.sum(axis=1, keepdims=True)
    return forward.transpose(1, 0, 2)


LIKELIHOOD_INTERVAL = 0.5   # log-likelihood units: about one standard error either side of the best offset
BOOTSTRAP_REPLICATES = 200  # resamples of a group's windows for its offset's standard error
SESSION_GAP_S = 3600.0      # coding paused this long: a new session
CHUNKS = 12
MIN_CHUNK_OBSERVATIONS = 100
MIN_SESSION_OBSERVATIONS = 30  # a session apart from the others gives its own offset from this many windows
MIN_DRIFT_SPAN_S = 3600.0
ROUGH_DRIFT_CHUNKS = 4
# An undisciplined laptop quartz clock keeps within about +-50 ppm (from memory: typical
# crystal tolerance plus temperature); used only to widen the span's error when no
# drift could be fitted.
DRIFT_ALLOWANCE_PPM = 50.0
DISAGREEING_P = 0.01        # groups whose offsets miss the line this unlikely are reported


@dataclass(frozen=True)
class ClockLine:
    """The fitted clock line with its errors: offset at the reference, drift, their
    standard errors, and the largest standard error of device -> log time over the
    observed span."""

    offset_s: float
    drift_ppm: float
    offset_error_s: float
    drift_error_ppm: float
    span_error_s: float
    residual_s: float
    warnings: tuple[str, ...]


def likelihood_peaks(offsets_s: np.ndarray, scores: np.ndarray) -> np.ndarray:
    """Per row of ``scores`` (rows x offsets), the middle of the contiguous run of offsets
    whose log-likelihood is within LIKELIHOOD_INTERVAL of the row's best (the apex, or the
    centre of a flat top); vectorised over rows."""
    scores = np.atleast_2d(scores)
    best = np.argmax(scores, axis=1)
    outside = scores < scores[np.arange(len(scores)), best][:, None] - LIKELIHOOD_INTERVAL
    column = np.arange(scores.shape[1])[None, :]
    left = np.where(outside & (column < best[:, None]), column, -1).max(axis=1) + 1
    right = np.where(outside & (column > best[:, None]), column, scores.shape[1]).min(axis=1) - 1
    return (offsets_s[left] + offsets_s[right]) / 2


def fit_clock_line(per_window: np.ndarray, grid: np.ndarray, start_ns: np.ndarray, reference_ns: int) -> ClockLine:
    """Offset at ``reference_ns`` and drift from each window's fine-stage score on ``grid``
    (``per_window``, windows x offsets) and the windows' starts (device clock).

    The windows are cut into time-ordered groups (``time_chunks``); each group's offset is
    the peak of its summed score, with a bootstrap standard error (its windows resampled
    BOOTSTRAP_REPLICATES times, fixed seed).  With two or more groups over at least
    MIN_DRIFT_SPAN_S, a weighted least-squares line through the group offsets (weights
    1 / SE^2) gives the offset at the reference, the drift and their covariance; with
    three or more groups the covariance is scaled up by the reduced chi-square when the
    groups scatter more than their errors say (the Birge ratio, common practice).
    Otherwise the offset is the peak of all windows, the drift 0 and both errors allow a
    drift of DRIFT_ALLOWANCE_PPM.  The span's error is the largest of the line's standard
    error at the first and the last window (its variance is a parabola in time).
    """
    rng = np.random.default_rng(0)
    floor = float(grid[1] - grid[0]) / np.sqrt(12.0) if len(grid) > 1 else 0.0  # the grid's own rounding
    chunks = time_chunks(start_ns)
    span_s = (start_ns.max() - start_ns.min()) / 1e9 if len(start_ns) else 0.0
    if len(chunks) < 2 or span_s < MIN_DRIFT_SPAN_S:
        everyone = np.arange(len(start_ns))
        offset, error = _group_offset(per_window, grid, everyone, rng)
        error = max(error, floor)
        # An unfitted drift moves the offset by up to the allowance times each window's
        # distance from the reference: RMS distance for the offset, the farthest for the span.
        distance = np.abs((start_ns - reference_ns) / 1e9 - offset) if len(start_ns) else np.zeros(1)
        allowance = DRIFT_ALLOWANCE_PPM * 1e-6
        span_error = float(np.hypot(error, allowance * distance.max()))
        error = float(np.hypot(error, allowance * np.sqrt(np.mean(distance ** 2))))
        return ClockLine(offset, 0.0, error, float("nan"), span_error, float("nan"), (
            f"drift not estimated (needs two or more groups of {MIN_CHUNK_OBSERVATIONS} observations spread over "
            f"{MIN_DRIFT_SPAN_S / 3600:.0f} hour or more); assumed 0 ppm",))
    fits = np.array([_group_offset(per_window, grid, rows, rng) for rows in chunks])
    offsets, errors = fits[:, 0], np.maximum(fits[:, 1], floor)
    centres = np.array([(np.median(start_ns[rows]) - reference_ns) / 1e9 for rows in chunks]) - offsets
    design = np.column_stack([np.ones(len(chunks)), centres])
    weights = 1.0 / errors ** 2
    covariance = np.linalg.inv(design.T @ (design * weights[:, None]))
    intercept, slope = covariance @ (design.T @ (weights * offsets))
    misses = offsets - (intercept + slope * centres)
    warnings = []
    if len(chunks) > 2:
        chi_square = float(np.sum(weights * misses ** 2))
        covariance = covariance * max(1.0, chi_square / (len(chunks) - 2))
        if chi2.sf(chi_square, len(chunks) - 2) < DISAGREEING_P:
            warnings.append(f"the {len(chunks)} groups of observations disagree about the offset beyond their "
                            "errors (was the clock corrected between sessions?); errors widened to match; "
                            "sync marks pin it down")
    if len(chunks) < ROUGH_DRIFT_CHUNKS:
        warnings.append(f"drift rests on only {len(chunks)} groups of observations; treat it as rough "
                        "(sync marks pin it down)")
    ends = (np.array([start_ns.min(), start_ns.max()]) - reference_ns) / 1e9 - intercept
    at_ends = np.column_stack([np.ones(2), ends])
    span_error = float(np.sqrt(np.max(np.einsum("ij,jk,ik->i", at_ends, covariance, at_ends))))
    residual = float(np.median(np.abs(misses))) if len(chunks) > 2 else float("nan")
    return ClockLine(float(intercept), float(slope * 1e6), float(np.sqrt(covariance[0, 0])),
                     float(np.sqrt(covariance[1, 1]) * 1e6), span_error, residual, tuple(warnings))


def _group_offset(per_window: np.ndarray, grid: np.ndarray, rows: np.ndarray,
                  rng: np.random.Generator) -> tuple[float, float]:
    """(offset, bootstrap standard error) of the windows ``rows``: the peak of their summed
    score, and the SD of the peaks of BOOTSTRAP_REPLICATES resamples (NaN for one window)."""
    scores = per_window[rows]
    offset = float(likelihood_peaks(grid, scores.sum(axis=0, dtype=np.float64))[0])
    if len(rows) < 2:
        return offset, float("nan")
    counts = rng.multinomial(len(rows), np.full(len(rows), 1.0 / len(rows)), size=BOOTSTRAP_REPLICATES)
    return offset, float(np.std(likelihood_peaks(grid, counts.astype(np.float32) @ scores), ddof=1))


def time_chunks(start_ns: np.ndarray) -> list[np.ndarray]:
    """Time-ordered groups of observations for the drift fit: first split where coding
    paused for more than SESSION_GAP_S (separate sessions), then each session into parts
    of at least MIN_CHUNK_OBSERVATIONS, about CHUNKS parts in all.  Sessions too small to
    give an offset of their own (MIN_SESSION_OBSERVATIONS) are left out."""
    order = np.argsort(start_ns, kind="stable")
    breaks = np.flatnonzero(np.diff(start_ns[order]) > SESSION_GAP_S * 1e9) + 1
    sessions = [session for session in np.split(order, breaks) if len(session) >= MIN_SESSION_OBSERVATIONS]
    if len(sessions) >= 2:
        return sessions
    sessions = [session for session in sessions if len(session) >= MIN_CHUNK_OBSERVATIONS]
    chunks = []
    for session in sessions:
        parts = max(1, min(len(session) // MIN_CHUNK_OBSERVATIONS,
                           int(np.ceil(CHUNKS * len(session) / len(start_ns)))))
        chunks.extend(np.array_split(session, parts))
    return chunks
