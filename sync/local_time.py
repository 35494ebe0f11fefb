"""Naive local wall-clock times -> UTC, with one documented rule for DST changes.

The rule is the one Python's ``zoneinfo`` applies to ``fold=0`` (PEP 495): a reading is
interpreted with the UTC offset that was in force *just before* the change.
  * ambiguous (the repeated hour when clocks go back): the FIRST occurrence, i.e. the
    earlier instant, still on summer time;
  * non-existent (the skipped hour when clocks go forward): shifted FORWARD by the length
    of the gap (Berlin 02:30 on 2026-03-29 becomes 03:30 CEST = 01:30 UTC), which keeps
    the order and spacing of events around the change.
Both kinds are counted so a report can say how many readings the rule decided.
Vectorised with pandas; no per-row Python.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd



@dataclass(frozen=True)
class LocalTimeCounts:
    """How many naive readings fell in a DST change (decided by the rule above)."""

    ambiguous: int = 0
    nonexistent: int = 0

    def __add__(self, other: "LocalTimeCounts") -> "LocalTimeCounts":
        return LocalTimeCounts(self.ambiguous + other.ambiguous, self.nonexistent + other.nonexistent)


def local_to_utc_ns(local_ns: np.ndarray, timezone: str) -> tuple[np.ndarray, LocalTimeCounts]:
    """Map naive wall-clock readings (int64 ns, NaT allowed) in ``timezone`` to UTC ns."""
    local_ns = np.asarray(local_ns, dtype=np.int64)
    naive = pd.DatetimeIndex(local_ns.view("datetime64[ns]"))
    strict = naive.tz_localize(timezone, ambiguous="NaT", nonexistent="NaT")
    result = strict.asi8.copy()
    undecided = np.flatnonzero(strict.isna() & ~naive.isna())
    if undecided.size == 0:
        return result, LocalTimeCounts()
    subset = naive[undecided]
    first = subset.tz_localize(timezone, ambiguous=np.ones(len(subset), dtype=bool), nonexistent="NaT")
    is_ambiguous = ~first.isna()
    result[undecided[is_ambiguous]] = first[is_ambiguous].asi8
    gap = subset[~is_ambiguous]
    if len(gap):
        # The first valid instant after the gap is the change itself; the offset in force
        # one nanosecond earlier is the "before" offset the rule reads the wall clock with.
        change = gap.tz_localize(timezone, nonexistent="shift_forward").tz_convert("UTC")
        before = (change - pd.Timedelta(1, "ns")).tz_convert(timezone)
        offset_ns = before.tz_localize(None).asi8 - before.tz_convert("UTC").tz_localize(None).asi8
        result[undecided[~is_ambiguous]] = gap.asi8 - offset_ns
    return result, LocalTimeCounts(int(is_ambiguous.sum()), int((~is_ambiguous).sum()))
