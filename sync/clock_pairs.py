"""Relative clock offsets between two coders' devices from their paired signal marks.

A paired run starts (and may end) on a spoken countdown: both coders press a key on
"now", and each device stores its own clock reading with the run's pairing id.  The two
readings of one signal are the same instant read on two clocks, give or take the two
coders' reaction times, so their difference is the devices' relative offset; a start
and an end signal far enough apart give the relative drift too.  No log is needed, so
a device whose marks match nothing in the log can borrow its partner's clock model
(observer_app/pipeline/alignment.py).

Convention (device_b read against device_a, like the CLOCK MODEL convention):
    device_b time = device_a time + offset_s + drift_ppm * 1e-6 * (device_a time - reference_ns)
"""
from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd
from scipy.stats import theilslopes

from sync.robust_spread import robust_sd

# The spread of the difference between two people's key presses on one spoken "now"
# (from memory: simple auditory reaction times vary between people by about 0.1 s SD,
# so the difference of two has about 0.15 s).  It floors every standard error below,
# because two marks cannot show their own scatter.
REACTION_DIFFERENCE_SD_S = 0.15
# Drift is fitted only from signals at least this far apart: over a 30-minute run two
# presses each off by up to 0.4 s would give a "drift" of hundreds of ppm, while quartz
# clocks drift by tens of ppm (common practice).  Three hours bring the reaction-time
# error of the drift, sqrt(2) * 0.15 s / span, under 20 ppm; below it the offset is the
# median difference and drift is taken as 0 (it moves a 30-minute run by ~0.1 s at most).
MIN_DRIFT_SPAN_S = 3 * 3600.0

RELATIVE_OFFSET_COLUMNS: tuple[str, ...] = (
    "device_a", "device_b", "offset_s", "drift_ppm", "standard_error_s", "marks_used", "reference_ns", "pairing_ids",
)


def relative_offsets(paired_marks: pd.DataFrame) -> pd.DataFrame:
    """One row per pair of devices that share signal marks.

    In: ``pairing_id``, ``device``, ``marked_ns`` (int64 UTC ns, device time) and
    optionally ``kind`` ("signal start" / "signal end").  Marks of one signal are
    matched by (pairing_id, kind, order within that pair on each device); rows
    without a pairing id are ignored.
    Out: device_a < device_b (text order), offset_s (device_b minus device_a at
    reference_ns, a device_a instant), drift_ppm, standard_error_s (of the offset),
    marks_used (signals read on both devices), reference_ns, pairing_ids (the runs
    used, comma-separated).
    """
    marks = paired_marks[paired_marks["pairing_id"].notna()].copy()
    marks["pairing_id"] = marks["pairing_id"].astype(str)
    marks["device"] = marks["device"].astype(str)
    marks["kind"] = marks["kind"].astype(str) if "kind" in marks else ""
    marks["marked_ns"] = marks["marked_ns"].astype(np.int64)
    marks = marks.sort_values("marked_ns", kind="stable")
    marks["rank"] = marks.groupby(["pairing_id", "kind", "device"]).cumcount()
    wide = marks.pivot_table(index=["pairing_id", "kind", "rank"], columns="device", values="marked_ns",
                             aggfunc="first")
    rows = []
    for device_a, device_b in combinations(sorted(wide.columns), 2):
        both = wide[[device_a, device_b]].dropna()
        if both.empty:
            continue
        rows.append(_fit_pair(device_a, device_b, both[device_a].to_numpy(np.int64),
                              both[device_b].to_numpy(np.int64), both.index.get_level_values("pairing_id")))
    return pd.DataFrame(rows, columns=list(RELATIVE_OFFSET_COLUMNS))


def _fit_pair(device_a: str, device_b: str, a_ns: np.ndarray, b_ns: np.ndarray, pairing_ids) -> dict:
    """Offset (and drift when the signals span long enough) of b against a; robust to one bad press."""
    reference = int(np.median(a_ns))
    since = (a_ns - reference) / 1e9
    gap = (b_ns - a_ns) / 1e9
    if len(gap) >= 2 and np.ptp(since) >= MIN_DRIFT_SPAN_S:
        slope = float(theilslopes(gap, since)[0])
        free = len(gap) - 2
    else:
        slope, free = 0.0, len(gap) - 1
    intercept = float(np.median(gap - slope * since))
    residual = gap - (intercept + slope * since)
    scatter = robust_sd(residual) if free > 0 else 0.0
    return {
        "device_a": device_a, "device_b": device_b, "offset_s": intercept, "drift_ppm": slope * 1e6,
        "standard_error_s": max(scatter, REACTION_DIFFERENCE_SD_S) / np.sqrt(len(gap)),
        "marks_used": int(len(gap)), "reference_ns": reference,
        "pairing_ids": ",".join(sorted(set(map(str, pairing_ids)))),
    }


def partner_time_ns(row: pd.Series | dict, device: str, device_ns: np.ndarray) -> np.ndarray:
    """``device``'s instants (int64 ns) read on the other device of a relative-offset row."""
    device_ns = np.asarray(device_ns, dtype=np.int64)
    reference, offset, drift = int(row["reference_ns"]), float(row["offset_s"]), float(row["drift_ppm"]) * 1e-6
    if device == row["device_a"]:
        return device_ns + np.rint(offset * 1e9 + drift * (device_ns - reference)).astype(np.int64)
    if device == row["device_b"]:
        return reference + np.rint((device_ns - reference - offset * 1e9) / (1.0 + drift)).astype(np.int64)
    raise ValueError(f"device {device!r} is not in this pair ({row['device_a']}, {row['device_b']})")
