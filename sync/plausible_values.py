"""What a time, a duration or a clock offset may be before fieldmark trusts it.

Why bounds at all: nanosecond integers overflow outside 1677-2262, and a year-1500 or
year-9999 stamp is always a typo or a wrong time_format, never a real observation or
log event.  Refusing it at the boundary with the row named keeps every later verb
(alignment, windows, export) free of overflow and of silently absurd results.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from sync.clock import NAT
from sync.errors import InputError

FIRST_PLAUSIBLE = pd.Timestamp("1990-01-01", tz="UTC")
LAST_PLAUSIBLE = pd.Timestamp("2100-01-01", tz="UTC")
FIRST_NS = int(FIRST_PLAUSIBLE.value)
LAST_NS = int(LAST_PLAUSIBLE.value)
RANGE_TEXT = "between 1990 and 2100"
LONGEST_EVENT_SECONDS = 7 * 86400.0      # a log event (attempt, step) longer than a week is a unit mistake
LONGEST_WINDOW_SECONDS = 3600.0          # an observed window or export window: at most an hour
LARGEST_OFFSET_SECONDS = 30 * 86400.0    # a device clock a month off is a wrong date, not a clock to model


def utc_ns(stamps: pd.Series) -> np.ndarray:
    """A datetime column of any unit -> int64 UTC ns; NaT and stamps outside the plausible
    range both become the NaT sentinel (so nothing ever overflows)."""
    stamps = pd.to_datetime(stamps, utc=True, errors="coerce")
    inside = stamps.notna() & (stamps >= FIRST_PLAUSIBLE) & (stamps < LAST_PLAUSIBLE)
    result = np.full(len(stamps), NAT, dtype=np.int64)
    if inside.any():
        result[inside.to_numpy(dtype=bool)] = stamps[inside].dt.as_unit("ns").array.asi8
    return result


def outside_range(stamps: pd.Series) -> pd.Series:
    """True where a datetime column (any unit) holds a stamp outside the plausible range."""
    stamps = pd.to_datetime(stamps, utc=True, errors="coerce")
    return stamps.notna() & ((stamps < FIRST_PLAUSIBLE) | (stamps >= LAST_PLAUSIBLE))


def ns_outside_range(ns: np.ndarray) -> np.ndarray:
    """True where int64 ns (NaT sentinel excluded) lie outside the plausible range."""
    return (ns != NAT) & ((ns < FIRST_NS) | (ns >= LAST_NS))


def check_durations(seconds: np.ndarray, file: str, column: str, rows: np.ndarray, row_word: str = "row") -> None:
    """Durations must be finite, zero or more, and at most a week; NaN (missing) is allowed."""
    seconds = np.asarray(seconds, dtype=np.float64)
    bad = ~np.isnan(seconds) & ~((seconds >= 0) & (seconds <= LONGEST_EVENT_SECONDS))
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise InputError(file, f"column {column}, {row_word} {int(rows[first])}",
                         f"duration {seconds[first]!r} s is not between 0 and {LONGEST_EVENT_SECONDS:.0f} s "
                         "(a week); fix the value or leave the cell empty")


def check_option_seconds(option: str, value: float | None, largest: float, *, allow_zero: bool = True) -> None:
    """A command-line number of seconds: finite, not negative, at most ``largest``."""
    if value is None:
        return
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero) or value > largest:
        low = "0" if allow_zero else "more than 0"
        raise InputError(None, option, f"{value!r} is not a number of seconds from {low} to {largest:g}")
