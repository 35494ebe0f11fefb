"""The automatic scan's gross stage: a clock off by hours, not seconds.

A laptop clock drifts by seconds a day, but two mistakes put a device's times off by
whole hours: a wall clock set by hand in the wrong hour, and times imported from a CSV
written with the wrong UTC offset (+01:00 in summer where +02:00 was meant; zones with
30- and 45-minute offsets exist too).  So before the fine ±300 s scan
(sync/clock_scan.py) this stage scores every offset within ±GROSS_RANGE_S (14 h, the
widest gap between two UTC offsets' neighbours in use) on a GROSS_STEP_S grid, with the
same likelihood-ratio score, and names the mistake an offset looks like.

It works on binned time: per learner, the events per GROSS_STEP_S bin (log clock) and,
per code, how many of its coded windows cover each bin (device clock); the events inside
windows coded c at every offset at once are then one cross-correlation, done by FFT
(``scipy.signal.fftconvolve``), so the cost grows with the learner's time span, not
with windows x events.
"""
from __future__ import annotations

import numpy as np
from scipy.signal import fftconvolve

GROSS_RANGE_S = 14 * 3600.0
GROSS_STEP_S = 10.0
QUARTER_HOUR_S = 900.0
# A hand-set clock or a wrong zone is off by whole quarter hours plus the clock's own
# error; within this many seconds of a quarter hour the offset is named as such a mistake.
MISTAKE_TOLERANCE_S = 120.0


def gross_totals(event_ns: np.ndarray, blocks: dict[str, tuple[int, int]], learners: np.ndarray,
                 start_ns: np.ndarray, end_ns: np.ndarray, labels: np.ndarray,
                 sizes: list[int]) -> tuple[np.ndarray, list[np.ndarray], list[np.ndarray]]:
    """(offsets_s, per dimension (codes x offsets) events inside the windows coded so,
    per dimension the seconds observed per code) on the grid -GROSS_RANGE_S ..
    +GROSS_RANGE_S by GROSS_STEP_S, window edges rounded to the grid.

    Arguments as ``sync.clock_scan.code_event_totals``.  The totals feed
    ``likelihood_ratio_curve`` unchanged.
    """
    step = int(round(GROSS_STEP_S * 1e9))
    lags = int(round(GROSS_RANGE_S / GROSS_STEP_S))
    offsets_s = np.arange(-lags, lags + 1) * GROSS_STEP_S
    first_code = np.concatenate(([0], np.cumsum(sizes)))
    codes = int(first_code[-1])
    totals = np.zeros((codes, 2 * lags + 1))
    exposure = np.zeros(codes)
    learners = np.asarray(learners).astype(str)
    for learner in np.unique(learners):
        if learner not in blocks:
            continue
        rows = np.flatnonzero(learners == learner)
        origin = int(start_ns[rows].min())
        enter = np.rint((start_ns[rows] - origin) / step).astype(np.int64)
        leave = np.maximum(np.rint((end_ns[rows] - origin) / step).astype(np.int64), enter + 1)
        length = int(leave.max())
        cover = np.zeros((codes, length + 1), dtype=np.float32)
        for dimension in range(len(sizes)):
            code = labels[rows, dimension]
            coded = code >= 0
            row = first_code[dimension] + code[coded]
            np.add.at(cover, (row, enter[coded]), 1.0)
            np.add.at(cover, (row, leave[coded]), -1.0)
            np.add.at(exposure, row, (leave[coded] - enter[coded]) * GROSS_STEP_S)
        cover = np.cumsum(cover, axis=1)[:, :length]
        # Events of this learner from `lags` bins before the first window to `lags` after
        # the last: bin k + j of this grid meets device bin k at offset (lags - j) * step.
        begin, stop = blocks[learner]
        times = event_ns[begin:stop]
        low = origin - lags * step
        times = times[(times >= low) & (times < low + (length + 2 * lags) * step)]
        # float32: counts stay exact to well under 0.5 after the transforms, at half the work.
        binned = np.bincount((times - low) // step, minlength=length + 2 * lags).astype(np.float32)
        used = np.flatnonzero(cover.any(axis=1))
        if len(used) and binned.any():
            totals[used] += fftconvolve(binned[None, :], cover[used, ::-1], mode="valid", axes=1)[:, ::-1]
    totals = np.maximum(np.rint(totals), 0).astype(np.int64)
    return (offsets_s, [totals[a:b] for a, b in zip(first_code[:-1], first_code[1:])],
            [exposure[a:b] for a, b in zip(first_code[:-1], first_code[1:])])


def gross_mistake(offset_s: float) -> str | None:
    """The warning for an offset a laptop clock cannot drift to: which mistake it looks
    like (a whole, half or quarter hour, plus the clock's own seconds), or None within
    half a quarter hour of zero (a plain unsynchronised clock)."""
    quarters = int(round(offset_s / QUARTER_HOUR_S))
    rest = offset_s - quarters * QUARTER_HOUR_S
    if quarters == 0:
        return None
    way = "ahead of" if offset_s > 0 else "behind"
    fix = "correct the times at their source or set the offset with --set-offset"
    if abs(rest) > MISTAKE_TOLERANCE_S:
        return (f"the clock runs {_duration(abs(offset_s))} {way} the log, far more than a clock drifts; "
                f"check the device's clock and time zone, then {fix}")
    size = abs(quarters) * QUARTER_HOUR_S
    said = f"{_duration(size)} {way} the log plus {rest:+.1f} s"
    if quarters % 4 == 0:
        hours = abs(quarters) // 4
        plural = "s" if hours > 1 else ""
        direction = "ahead" if offset_s > 0 else "behind"
        example = ("too small (e.g. +01:00 written in summer where +02:00 was meant)" if offset_s > 0
                   else "too large (e.g. +02:00 written in winter where +01:00 was meant)")
        return (f"the clock runs {said}: looks like a clock set {hours} hour{plural} {direction} by hand, "
                f"or a wrong UTC offset in imported times, {hours} hour{plural} {example}; {fix}")
    zone = "30" if quarters % 2 == 0 else "15 or 45"
    return (f"the clock runs {said}: looks like a wrong UTC offset in imported times (a zone whose offset "
            f"has {zone} minutes), or a clock set by hand that far off; {fix}")


def _duration(seconds: float) -> str:
    """'2 h 15 min' / '1 h' / '45 min' / '7 min 12 s'."""
    whole = int(round(seconds))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    parts = [f"{hours} h"] if hours else []
    parts += [f"{minutes} min"] if minutes else []
    parts += [f"{secs} s"] if secs and not hours else []
    return " ".join(parts) or "0 s"
