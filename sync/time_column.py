"""How a log's time column becomes UTC nanoseconds: ISO 8601, epoch seconds/milliseconds,
native timestamps, and naive local times (via ``sync.local_time``'s DST rule).

``time_format="auto"`` decides per column: numbers are epoch seconds, or epoch
milliseconds when their median magnitude is above 1e11 (later than the year 5138 in
seconds, so unambiguous for real logs); text is ISO 8601.  A strftime pattern
("%m/%d/%Y %H:%M:%S", "%d.%m.%Y %H:%M") reads text as labs' systems write it.  Text
stamps that carry an offset ("Z", "+02:00", or a pattern with %z) are exact; those
without one are local times in the log's ``timezone``.  A time that cannot be read is
reported with its value and row, and with the common pattern that reads the whole
column when there is one; when a day-first and a month-first pattern both read every
value, both are named and neither is picked (03/04 is March or April: only the lab
knows).  Every reader calls ``parse_time_column``; this module is the only place that
reads times.  Vectorised throughout.
"""
from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from sync.clock import NAT
from sync.errors import InputError
from sync.local_time import LocalTimeCounts, local_to_utc_ns
from sync.plausible_values import RANGE_TEXT, ns_outside_range, utc_ns

EPOCH_MS_THRESHOLD = 1e11
# [ \t] rather than \s: RE2 can run these, so pandas matches them in Arrow, not row by row.
# A time (hours alone only right after the date) followed by "Z" or an offset.
_OFFSET_PATTERN = r"(?:\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?|[Tt ]\d{2})[ \t]*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)$"
_NUMBER_PATTERN = r"^[ \t]*[+-]?\d+(?:\.\d*)?[ \t]*$"
SHOWN_ROWS = 5
SAMPLE_ROWS = 64
COMMON_PATTERNS: tuple[str, ...] = (
    "%d/%m/%Y %H:%M:%S", "%m/%d/%Y %H:%M:%S", "%d/%m/%Y %H:%M", "%m/%d/%Y %H:%M",
    "%d.%m.%Y %H:%M:%S", "%d.%m.%Y %H:%M", "%d-%m-%Y %H:%M:%S", "%m-%d-%Y %H:%M:%S",
    "%Y/%m/%d %H:%M:%S", "%m/%d/%Y %I:%M:%S %p", "%m/%d/%Y %I:%M %p", "%d/%m/%Y %I:%M:%S %p",
    "%Y%m%d%H%M%S", "%d %b %Y %H:%M:%S", "%b %d %Y %H:%M:%S",
)
"""Patterns tried only to suggest one when a time cannot be read (common practice in lab logs)."""


def is_pattern(time_format: str) -> bool:
    """A strftime pattern rather than one of the named formats."""
    return "%" in time_format


def parse_time_column(values: pd.Series, time_format: str, timezone: str | None, file: str,
                      column: str, rows: np.ndarray, row_word: str = "row") -> tuple[np.ndarray, LocalTimeCounts]:
    """Parse ``values`` into int64 UTC ns; ``rows`` are the 1-based row (or line) numbers
    that messages name, ``row_word`` what to call them.

    Raises ``InputError`` naming the first rows that are empty or cannot be read, or when
    naive local stamps appear and the log entry gives no ``timezone``.
    """
    dtype = values.dtype
    if isinstance(dtype, pd.DatetimeTZDtype):
        result = utc_ns(values)
        counts = LocalTimeCounts()
    elif pd.api.types.is_datetime64_dtype(dtype):
        naive = utc_ns(values)  # wall-clock numbers; out of range -> NaT
        result, counts = local_to_utc_ns(naive, _require_timezone(timezone, file, column))
    elif is_pattern(time_format):
        result, counts = _parse_pattern(values.astype("str"), time_format, timezone, file, column)
    elif pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
        if time_format == "iso":
            raise InputError(file, f"column {column}", "holds numbers, not ISO 8601 text; "
                             "set time_format = \"epoch_s\" or \"epoch_ms\" in the [[logs]] entry")
        result, counts = _epoch_ns(values.to_numpy(dtype=np.float64, na_value=np.nan), time_format), LocalTimeCounts()
    else:
        result, counts = _parse_text(values.astype("str"), time_format, timezone, file, column)
    result[ns_outside_range(result)] = NAT
    missing = result == NAT
    if missing.any():
        _raise_bad_rows(values, missing, rows, file, column, row_word, time_format)
    return result, counts


def _read_pattern(text: pd.Series, pattern: str) -> pd.Series:
    """Text read with a strftime pattern: tz-aware UTC when the pattern has %z, else naive; NaT where it fails."""
    aware = "%z" in pattern or "%Z" in pattern
    return pd.to_datetime(text, format=pattern, errors="coerce", utc=aware)


def _parse_pattern(text: pd.Series, pattern: str, timezone: str | None, file: str,
                   column: str) -> tuple[np.ndarray, LocalTimeCounts]:
    text = text.str.strip()
    parsed = utc_ns(_read_pattern(text.where(text != ""), pattern))  # out of the plausible range -> NaT
    if "%z" in pattern or "%Z" in pattern:
        return parsed, LocalTimeCounts()
    read = parsed != NAT
    counts = LocalTimeCounts()
    if read.any():
        utc, counts = local_to_utc_ns(parsed[read], _require_timezone(timezone, file, column))
        parsed[read] = utc
    return parsed, counts


def suggested_patterns(values: pd.Series) -> list[str]:
    """The common patterns that read every non-empty value (at most the two of an
    ambiguous day/month pair are returned together; the caller must not pick one)."""
    text = values.astype("str").str.strip()
    text = text[text.ne("") & values.notna()]
    if text.empty:
        return []
    return [pattern for pattern in COMMON_PATTERNS if _read_pattern(text, pattern).notna().all()]


def _suggestion(values: pd.Series, time_format: str) -> str:
    """What to write in time_format, in words; "" when no common pattern reads the column."""
    fitting = [pattern for pattern in suggested_patterns(values) if pattern != time_format]
    day_first = [p for p in fitting if p.startswith("%d")]
    month_first = [p for p in fitting if p.startswith("%m")]
    if day_first and month_first:
        return (f"; both time_format = \"{day_first[0]}\" (day first) and \"{month_first[0]}\" (month first) "
                "read every value: set the one your system writes")
    if fitting:
        return f"; time_format = \"{fitting[0]}\" reads every value"
    return ""


def _require_timezone(timezone: str | None, file: str, column: str) -> str:
    if timezone is None:
        raise InputError(file, f"column {column}", "has times without a UTC offset; add timezone = "
                         "\"Area/City\" (the zone the log was written in) to its [[logs]] entry")
    return timezone


def _epoch_ns(numbers: np.ndarray, time_format: str) -> np.ndarray:
    """Epoch numbers -> ns; NaN -> the NaT sentinel."""
    if time_format == "auto":
        finite = numbers[np.isfinite(numbers)]
        in_ms = finite.size > 0 and np.median(np.abs(finite)) > EPOCH_MS_THRESHOLD
        scale = 1e6 if in_ms else 1e9
    else:
        scale = 1e6 if time_format == "epoch_ms" else 1e9
    result = np.full(numbers.shape, NAT, dtype=np.int64)
    with np.errstate(invalid="ignore", over="ignore"):
        finite = np.isfinite(numbers) & (np.abs(numbers * scale) < 2.0 ** 62)
    result[finite] = np.round(numbers[finite] * scale).astype(np.int64)
    return result


def _offset_stamps(text: pd.Series) -> np.ndarray | None:
    """UTC ns when every stamp is ISO 8601 with a UTC offset, read in one pass by Arrow's
    parser; None (the general path reads them) when any is not.

    Arrow reads a subset of what pandas' ISO 8601 parser reads, each to the same instant
    (and only stamps with an offset, as the type asks).  A sample is tried first so that
    a column of local times costs nothing here.
    """
    utc = pa.timestamp("ns", "UTC")
    try:
        pc.cast(pa.array(text.iloc[:SAMPLE_ROWS], pa.string()), utc)
        parsed = pc.cast(pa.array(text, pa.string()), utc)
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError):
        return None
    return np.array(pc.fill_null(parsed.cast(pa.int64()), NAT), dtype=np.int64)  # a writable copy


def _parse_text(text: pd.Series, time_format: str, timezone: str | None, file: str,
                column: str) -> tuple[np.ndarray, LocalTimeCounts]:
    if time_format in ("iso", "auto") and (exact := _offset_stamps(text)) is not None:
        return exact, LocalTimeCounts()
    text = text.str.strip()
    present = text.notna() & (text != "")
    if time_format in ("epoch_s", "epoch_ms") or (
        time_format == "auto" and present.any() and text[present].str.match(_NUMBER_PATTERN).all()
    ):
        numbers = pd.to_numeric(text.where(present), errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        return _epoch_ns(numbers, time_format), LocalTimeCounts()
    result = np.full(len(text), NAT, dtype=np.int64)
    has_offset = (text.str.contains(_OFFSET_PATTERN, regex=True) & present).to_numpy(dtype=bool)
    if has_offset.any():
        aware = pd.to_datetime(text[has_offset], format="ISO8601", utc=True, errors="coerce", cache=False)
        result[has_offset] = utc_ns(aware)
    naive_rows = present.to_numpy(dtype=bool) & ~has_offset
    counts = LocalTimeCounts()
    if naive_rows.any():
        naive = utc_ns(pd.to_datetime(text[naive_rows], format="ISO8601", errors="coerce",
                                      cache=False))  # its cache costs more than it saves; out of range -> NaT
        parsed = naive != NAT
        if parsed.any():
            utc, counts = local_to_utc_ns(naive, _require_timezone(timezone, file, column))
            naive = np.where(parsed, utc, naive)
        result[naive_rows] = naive
    return result, counts


def _raise_bad_rows(values: pd.Series, missing: np.ndarray, rows: np.ndarray, file: str, column: str,
                    row_word: str, time_format: str) -> None:
    positions = np.flatnonzero(missing)
    shown = ", ".join(str(int(rows[p])) for p in positions[:SHOWN_ROWS])
    more = f" and {positions.size - SHOWN_ROWS} more" if positions.size > SHOWN_ROWS else ""
    first = values.iloc[positions[0]]
    blank = pd.isna(first) or not str(first).strip()
    if blank:
        raise InputError(file, f"column {column}, {row_word} {shown}{more}",
                         "the time is empty; every event needs its time")
    if _reads_as_time(first, time_format):
        expected = (f"is not a time {RANGE_TEXT}; fix the date, or the time_format in this log's [[logs]] "
                    "entry of study.toml if it reads the value wrongly (epoch milliseconds as seconds)")
    elif is_pattern(time_format):
        expected = (f"could not be read as a time with time_format \"{time_format}\" (this log's [[logs]] entry "
                    "of study.toml); fix the value or the pattern")
    elif time_format == "iso":  # xAPI statements, or a log set to ISO 8601 only
        expected = "could not be read as an ISO 8601 time (2026-03-29T14:05:00+02:00); fix the value"
    else:
        expected = ("could not be read as a time; write ISO 8601 (2026-03-29T14:05:00+02:00) or epoch "
                    "seconds/milliseconds, or set time_format = \"<strftime pattern>\" in this log's [[logs]] "
                    "entry of study.toml")
    raise InputError(file, f"column {column}, {row_word} {shown}{more}",
                     f"{str(first)[:40]!r} {expected}{_suggestion(values, time_format)}")


def _reads_as_time(value: object, time_format: str) -> bool:
    """Whether one refused value is a time at all (so it was refused for its range), read
    as the column was: native and number columns always are; text by its pattern, as an
    epoch number, or as ISO 8601.  Python's own parsers, as pandas' refuse years outside
    1677-2262 rather than read them.  Only on the error path, for one value."""
    if not isinstance(value, str):
        return True
    text = value.strip()
    if is_pattern(time_format):
        try:
            datetime.strptime(text, time_format)
        except ValueError:
            return False
        return True
    try:
        return bool(np.isfinite(float(text)))
    except ValueError:
        pass
    try:
        datetime.fromisoformat(text.replace("z", "Z"))
    except ValueError:
        return False
    return True


def datetime_column_ns(values: pd.Series) -> np.ndarray:
    """A datetime column of the store (UTC) -> int64 ns, NaT as the int64 minimum."""
    return pd.to_datetime(values, utc=True).dt.as_unit("ns").array.asi8.astype(np.int64)
