"""Automatic clock model, no sync marks needed: the offset under which the codes best
explain each learner's log activity inside the observed windows.

For every candidate offset o (default -300..+300 s in 0.5 s steps) each observation's
window is moved onto the log clock ([start - o, end - o)) and the learner's events in it
are counted.  The score of o is the likelihood-ratio (G) statistic of "one event rate per
code" against "one rate for all" (Poisson deviance), summed over dimensions, so a scheme
needs no hints about which code means a busy or a quiet log.  Counting is exact and
vectorised over all offsets at once: each event near a window adds +1 on the run of grid
offsets that would put it inside, in per-code difference arrays summed by np.bincount.

Before it, a gross stage (sync/clock_gross.py) scores every offset within ±14 h on a
10 s grid; when its best offset lies beyond ±300 s and clearly beats everything within,
the scan is centred there instead, and the model's warning names the mistake it looks
like (a clock set in the wrong hour by hand, a wrong UTC offset in imported times).

This coarse scan finds the offset to within a few seconds.  The fine stage
(sync/clock_refine.py) then reads the log around each window with a hidden-state chain
and scores offsets 0.1 s apart by how well each code names the state at the window's
middle, where a coder's "what filled most of the window" is decided.

Drift and errors (``sync.clock_refine.fit_clock_line``): the observations are cut into
time-ordered groups (each coding session apart from the others when there are two or
more, otherwise parts of the one session); each group's offset is the fine stage's peak
with a bootstrap standard error, and a weighted least-squares line through them gives
the offset at the reference time, the drift, and their covariance -- hence the offset's
standard error and the largest standard error over the observed span, drift included.
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pandas as pd
from scipy.special import xlogy

from sync.clock import ClockModel
from sync.clock_gross import gross_mistake, gross_totals
from sync.clock_refine import fit_clock_line, middle_states
from sync.event_table import learner_blocks
from sync.time_column import datetime_column_ns
from sync.robust_spread import robust_sd

DEFAULT_RANGE_S = 300.0
DEFAULT_STEP_S = 0.5
FINE_STEP_S = 0.1
FINE_HALF_WIDTH_S = 30.0
UNCERTAIN_OFFSET_S = 1.0
UNCERTAIN_DRIFT_PPM = 10.0
AMBIGUOUS_BELOW = 0.25
CLEAR_PEAK_SPREADS = 20.0  # a peak this many noise spreads above the far level is clear
INFORMATIVE_SHARE = 0.5  # dimensions at least half as prominent as the best one are used
SEPARATION_WINDOWS = 3.0  # rivals are offsets more than 3 window lengths beyond the peak
PAIRS_PER_BLOCK = 4_000_000
GROSS_WINS = 2.0  # a far offset must score twice the best near one to move the scan there
PEAK_REGION = 0.3  # the peak region: scores within 30% of the peak's height above the median


def default_candidates() -> np.ndarray:
    """-300 .. +300 s in 0.5 s steps (1201 offsets)."""
    return np.round(np.arange(-DEFAULT_RANGE_S, DEFAULT_RANGE_S + DEFAULT_STEP_S / 2, DEFAULT_STEP_S), 6)


def code_event_totals(event_ns: np.ndarray, blocks: dict[str, tuple[int, int]], learners: np.ndarray,
                      start_ns: np.ndarray, end_ns: np.ndarray, offsets_ns: np.ndarray,
                      labels: np.ndarray, sizes: list[int]) -> list[np.ndarray]:
    """Per dimension, per code, per offset: the events of observed learners inside the
    windows coded so, with every window moved to [start - o, end - o).

    ``event_ns`` is EVENTS.time_ns sorted by (learner, time) and ``blocks`` its
    ``learner_blocks``; ``offsets_ns`` an evenly spaced ascending grid; ``labels`` an
    (observations x dimensions) int array of code numbers (-1 = not coded) with
    ``sizes[d]`` codes in dimension d.  Returns one (codes x offsets) int64 array per
    dimension.  No (observations x offsets) matrix is ever built: each (event, window)
    pair adds +1 on the run of grid offsets that put the event inside the window, in a
    difference array per code, summed by ``np.bincount``.
    """
    k = len(offsets_ns)
    width = k + 1
    totals = [np.zeros(size * width, dtype=np.int64) for size in sizes]
    if len(start_ns) == 0 or k == 0:
        return [t.reshape(size, width)[:, :k] for t, size in zip(totals, sizes)]
    low = np.int64(offsets_ns[0])
    step = np.int64(offsets_ns[1] - offsets_ns[0]) if k > 1 else np.int64(1)
    high = np.int64(offsets_ns[-1])
    first = np.zeros(len(start_ns), dtype=np.int64)
    last = np.zeros(len(start_ns), dtype=np.int64)
    learners = np.asarray(learners).astype(str)
    for learner in np.unique(learners):
        if learner not in blocks:
            continue
        rows = np.flatnonzero(learners == learner)
        begin, stop = blocks[learner]
        times = event_ns[begin:stop]
        first[rows] = begin + np.searchsorted(times, start_ns[rows] - high, side="left")
        last[rows] = begin + np.searchsorted(times, end_ns[rows] - low, side="left")
    lengths = np.maximum(last - first, 0)
    for rows in _blocks(lengths):
        size = lengths[rows]
        owner = np.repeat(rows, size)
        position = np.arange(int(size.sum())) - np.repeat(np.cumsum(size) - size, size)
        times = event_ns[np.repeat(first[rows], size) + position]
        # Event t is inside the window for offsets o in [start - t, end - t): grid
        # indices [enter, leave), by ceiling division onto the grid.
        enter = np.clip(-((times - start_ns[owner] + low) // step), 0, k)
        leave = np.clip(-((times - end_ns[owner] + low) // step), 0, k)
        for dimension, total in enumerate(totals):
            code = labels[owner, dimension]
            coded = code >= 0
            base = code[coded] * width
            total += np.bincount(base + enter[coded], minlength=total.size)
            total -= np.bincount(base + leave[coded], minlength=total.size)
    return [np.cumsum(t.reshape(size, width), axis=1)[:, :k] for t, size in zip(totals, sizes)]


def _blocks(lengths: np.ndarray) -> list[np.ndarray]:
    """Consecutive observation ranges holding about PAIRS_PER_BLOCK (event, window) pairs
    each, so the pair arrays stay a few tens of megabytes."""
    cumulative = np.cumsum(lengths)
    cuts = np.searchsorted(cumulative, np.arange(PAIRS_PER_BLOCK, cumulative[-1] + 1, PAIRS_PER_BLOCK), side="left")
    edges = np.unique(np.concatenate(([0], np.minimum(cuts + 1, len(lengths)), [len(lengths)])))
    return [np.arange(a, b) for a, b in zip(edges[:-1], edges[1:])]


def likelihood_ratio_curve(totals: list[np.ndarray], exposures: list[np.ndarray]) -> np.ndarray:
    """Sum over dimensions of the likelihood-ratio (G) statistic, per offset column.

    G = 2 * sum_c N_c * log(rate_c / rate), with N_c the events in windows coded c,
    rate_c = N_c / (seconds observed with code c), rate = all events / all seconds: the
    Poisson deviance between one event rate per code and one rate for all.  It is 0 when
    the code says nothing about log activity and grows the better it does.
    """
    score = np.zeros(totals[0].shape[1]) if totals else np.zeros(0)
    for events_per_code, seconds_per_code in zip(totals, exposures):
        used = seconds_per_code > 0
        if used.sum() < 2:
            continue
        counts = events_per_code[used].astype(np.float64)
        seconds = seconds_per_code[used][:, None]
        everything = counts.sum(axis=0)
        overall_rate = everything / seconds.sum()
        with np.errstate(divide="ignore", invalid="ignore"):
            score += 2.0 * (xlogy(counts, counts / seconds).sum(axis=0) - xlogy(everything, overall_rate))
    return score


NO_PEAK = "no offset explains the log activity better than the others"


def locate_peak(offsets_s: np.ndarray, scores: np.ndarray, separation_s: float) -> tuple[float, float, list[str]]:
    """(estimate, confidence, warnings) from a score curve.

    Offsets more than ``separation_s`` beyond the peak are the "far" level: its median is
    the baseline and its robust spread (sync/robust_spread.py) the noise.  The estimate is the
    middle of the contiguous peak region (scores within 30% of the peak's height above
    the baseline): the apex of a sharp peak, the centre of a plateau.
    confidence = separation * clearness, where separation = 1 - (best far score -
    baseline) / (peak - baseline) (0 = a rival as good, 1 = none) and clearness =
    min(1, (peak - baseline) / (CLEAR_PEAK_SPREADS * noise)).
    """
    warnings: list[str] = []
    best = int(np.argmax(scores))
    top = float(scores[best])
    far = np.abs(offsets_s - offsets_s[best]) > separation_s
    level = scores[far] if far.sum() >= 10 else scores
    base = float(np.median(level))
    height = top - base
    if not np.isfinite(height) or height <= 1e-12:
        return float(offsets_s[best]), 0.0, [NO_PEAK]
    inside = scores >= top - PEAK_REGION * height
    left = right = best
    while left > 0 and inside[left - 1]:
        left -= 1
    while right < len(scores) - 1 and inside[right + 1]:
        right += 1
    estimate = float((offsets_s[left] + offsets_s[right]) / 2)
    rivals = (offsets_s < offsets_s[left] - separation_s) | (offsets_s > offsets_s[right] + separation_s)
    rival = float(scores[rivals].max()) if rivals.any() else base
    separation = float(np.clip(1.0 - (rival - base) / height, 0.0, 1.0))
    clearness = float(min(1.0, peak_prominence(offsets_s, scores, separation_s) / CLEAR_PEAK_SPREADS))
    if clearness < 0.5:
        warnings.append("no clear best offset: the codes barely explain the log activity at any offset; "
                        "add sync marks or set the offset by hand")
    elif separation < AMBIGUOUS_BELOW:
        rival_at = float(offsets_s[rivals][np.argmax(scores[rivals])])
        warnings.append(f"ambiguous: an offset of {rival_at:+.1f} s explains the log almost as well as "
                        f"{estimate:+.1f} s; add sync marks or check the result")
    if left == 0 or right == len(scores) - 1:
        warnings.append("the best offset is at the edge of the scanned range; widen the range")
    return estimate, separation * clearness, warnings


def peak_prominence(offsets_s: np.ndarray, scores: np.ndarray, separation_s: float) -> float:
    """How many noise spreads the peak stands above the far level (see ``locate_peak``)."""
    best = int(np.argmax(scores))
    far = np.abs(offsets_s - offsets_s[best]) > separation_s
    level = scores[far] if far.sum() >= 10 else scores
    base = float(np.median(level))
    noise = robust_sd(level)
    height = float(scores[best]) - base
    return float("inf") if noise <= 0 < height else (0.0 if noise <= 0 else height / noise)


def _informative_dimensions(offsets_s: np.ndarray, per_dimension: list[np.ndarray], separation_s: float) -> list[int]:
    """Dimensions whose own peak is at least half as prominent as the clearest one's, so a
    dimension unrelated to log activity adds no noise; all of them when none stands out."""
    prominence = [peak_prominence(offsets_s, scores, separation_s) for scores in per_dimension]
    if not prominence or max(prominence) <= 0:
        return list(range(len(per_dimension)))
    return [column for column, value in enumerate(prominence) if value >= INFORMATIVE_SHARE * max(prominence)]


def scan_offset(observations: pd.DataFrame, events: pd.DataFrame, dimensions: list[str],
                candidates: np.ndarray | None = None) -> ClockModel:
    """Automatic clock model for ONE device from its observations and the EVENTS table.

    ``observations`` needs device, log_id, window_start, window_end (device clock,
    datetime UTC) and one column per name in ``dimensions``; ``candidates`` are offsets in
    seconds on an even grid (default -300..300 by 0.5).  Rows whose log_id has no events
    still count (as empty windows).
    """
    devices = observations["device"].unique()
    if len(devices) != 1:
        raise ValueError(f"scan_offset takes one device's observations, got {list(devices)}")
    gross = candidates is None
    candidates = default_candidates() if gross else np.asarray(candidates, dtype=np.float64)
    if len(candidates) > 2 and not np.allclose(np.diff(candidates), candidates[1] - candidates[0]):
        raise ValueError("candidates must be an evenly spaced ascending grid")
    usable = observations.dropna(subset=["window_start", "window_end"])
    usable = usable[usable["log_id"].fillna("").astype(str) != ""]
    start = datetime_column_ns(usable["window_start"])
    end = datetime_column_ns(usable["window_end"])
    learners = usable["log_id"].astype(str).to_numpy()
    labels, sizes = _code_numbers(usable, dimensions)
    seconds = (end - start) / 1e9
    event_ns = events["time_ns"].to_numpy()
    blocks = learner_blocks(events)
    window_s = float(np.median(seconds)) if len(start) else 0.0

    def curves(rows: np.ndarray, offsets_s: np.ndarray, columns: list[int],
               shift_ns: np.ndarray | int = 0) -> list[np.ndarray]:
        """Score per offset and dimension (``columns``) for the observations ``rows``,
        windows moved by ``shift_ns``."""
        offsets_ns = np.round(offsets_s * 1e9).astype(np.int64)
        shift = shift_ns if np.isscalar(shift_ns) else shift_ns[rows]
        chosen = labels[np.ix_(rows, columns)]
        chosen_sizes = [sizes[column] for column in columns]
        totals = code_event_totals(event_ns, blocks, learners[rows], start[rows] - shift, end[rows] - shift,
                                   offsets_ns, chosen, chosen_sizes)
        exposures = _seconds_per_code(chosen, seconds[rows], chosen_sizes)
        return [likelihood_ratio_curve([total], [exposure]) for total, exposure in zip(totals, exposures)]

    everyone = np.arange(len(start))
    separation_s = SEPARATION_WINDOWS * window_s
    if gross and len(start):
        candidates = candidates + _gross_shift(event_ns, blocks, learners, start, end, labels, sizes)
    per_dimension = curves(everyone, candidates, list(range(len(dimensions))))
    informative = _informative_dimensions(candidates, per_dimension, separation_s)

    scores = np.sum([per_dimension[column] for column in informative], axis=0)
    estimate, confidence, warnings = locate_peak(candidates, scores, separation_s)
    mistake = gross_mistake(estimate) if gross else None
    if mistake:
        warnings.append(mistake)
    left_out = [dimensions[column] for column in range(len(dimensions)) if column not in informative]
    if left_out:
        warnings.append(f"left out of the scan, their codes do not follow log activity: {', '.join(left_out)}")
    reference = int(np.median(start)) - int(round(estimate * 1e9)) if len(start) else 0
    middle = start + (end - start) // 2
    rates = [total[:, 0] / np.maximum(exposure, 1e-9) for total, exposure in zip(
        code_event_totals(event_ns, blocks, learners, start, end, np.array([int(round(estimate * 1e9))]),
                          labels[:, informative], [sizes[column] for column in informative]),
        _seconds_per_code(labels[:, informative], seconds, [sizes[column] for column in informative]))]
    states = middle_states(event_ns, blocks, learners, middle - int(round(estimate * 1e9)), labels[:, informative],
                           [sizes[column] for column in informative], rates)

    near = _fine_grid(estimate)
    line = fit_clock_line(states.window_scores(near, middle), near, start, reference)
    if NO_PEAK in warnings:
        # a flat curve is no evidence: the fine stage's spread around an arbitrary offset is
        # not an error bar, so the errors are unknown and no uncertainty gate lets it through
        line = replace(line, offset_error_s=math.inf, span_error_s=math.inf)
    if line.drift_error_ppm > UNCERTAIN_DRIFT_PPM:
        warnings.append(f"drift uncertain: standard error about {line.drift_error_ppm:.0f} ppm; sync marks pin it down")
    if line.span_error_s > UNCERTAIN_OFFSET_S:
        warnings.append(f"offset uncertain: standard error {line.span_error_s:.1f} s over the observed span "
                        "(few windows show the learner's activity change); sync marks pin it down")
    return ClockModel(
        device=str(devices[0]), method="auto", offset_s=line.offset_s, drift_ppm=line.drift_ppm, reference_ns=reference,
        marks_used=0, median_abs_residual_s=line.residual_s, confidence=confidence,
        offset_standard_error_s=line.offset_error_s, span_standard_error_s=line.span_error_s,
        warnings=tuple(warnings) + line.warnings,
        scan_offsets_s=tuple(float(x) for x in candidates), scan_scores=tuple(round(float(s), 6) for s in scores),
    )


def _gross_shift(event_ns: np.ndarray, blocks: dict[str, tuple[int, int]], learners: np.ndarray,
                 start: np.ndarray, end: np.ndarray, labels: np.ndarray, sizes: list[int]) -> float:
    """Where to centre the ±DEFAULT_RANGE_S scan: 0, or the gross stage's best offset
    (sync/clock_gross.py) when it lies beyond that range and scores at least
    GROSS_WINS times the best score within it (rounded to the scan's step)."""
    offsets_s, totals, exposures = gross_totals(event_ns, blocks, learners, start, end, labels, sizes)
    scores = likelihood_ratio_curve(totals, exposures)
    near = np.abs(offsets_s) <= DEFAULT_RANGE_S
    best = int(np.argmax(scores))
    if near[best] or scores[best] < GROSS_WINS * max(float(scores[near].max()), 0.0) or scores[best] <= 0:
        return 0.0
    return float(np.round(offsets_s[best] / DEFAULT_STEP_S) * DEFAULT_STEP_S)


def _code_numbers(observations: pd.DataFrame, dimensions: list[str]) -> tuple[np.ndarray, list[int]]:
    """(observations x dimensions) code numbers, -1 where not coded, and codes per dimension."""
    labels = np.full((len(observations), len(dimensions)), -1, dtype=np.int64)
    sizes = []
    for column, name in enumerate(dimensions):
        codes = pd.Categorical(observations[name])
        labels[:, column] = codes.codes
        sizes.append(len(codes.categories))
    return labels, sizes


def _seconds_per_code(labels: np.ndarray, seconds: np.ndarray, sizes: list[int]) -> list[np.ndarray]:
    """Per dimension, the seconds observed under each code (the rates' exposure)."""
    result = []
    for dimension, size in enumerate(sizes):
        coded = labels[:, dimension] >= 0
        result.append(np.bincount(labels[coded, dimension], weights=seconds[coded], minlength=size))
    return result


def _fine_grid(centre_s: float) -> np.ndarray:
    """Offsets within FINE_HALF_WIDTH_S of ``centre_s`` in FINE_STEP_S steps.

    Wide enough that the curve's median is off the peak, which ``locate_peak`` needs."""
    return np.round(np.arange(centre_s - FINE_HALF_WIDTH_S, centre_s + FINE_HALF_WIDTH_S + FINE_STEP_S / 2,
                              FINE_STEP_S), 6)
