"""Window features: what the learner did in each window, computed without a loop.

How it stays fast (10M events x 50k windows): the events are sorted once by
(learner, time); each window's learner is a contiguous run of rows, and the window's first
and last rows come from a vectorised binary search inside that run.  The rows of all
windows are then laid out one window after another (``WindowEvents.member``), so every
window-local figure is a segment reduction (``ufunc.reduceat``) or a ``bincount`` over
those rows, and every history figure is a difference of prefix sums over the whole log.

How its memory stays bounded: the work runs on blocks of whole learners (every figure
is per learner, so a block needs nothing of another) and the blocks' columns are joined.
The blocks are cut from a table in memory after the one sort (``compute_features``,
about ``block_rows`` events at a time), or arrive one by one from a file sorted by
learner and time (``compute_features_from_blocks``: one block of events in memory at a
time).  The one choice that spans learners -- which action_ and outcome_ columns exist --
is made when every block is in: such a feature returns per-window counts of every value
(``ColumnsByValue``) and the columns are chosen from their sums over all windows, so
blocked output is bit-identical to one block.

A lab adds its own feature as one function::

    @feature
    def long_pauses(view: WindowEvents) -> dict[str, np.ndarray]:
        \"\"\"Pauses of a minute or more inside the window.\"\"\"
        return {"long_pauses": view.count_members(view.internal_gap_ns >= 60e9)}

A feature with one column per value of a text column returns
``view.counts_by_value(column, prefix, choose)`` instead, so that every block gets the
same columns.  The first docstring line is the definition of its columns in the manifest
(export/column_descriptions.py).  Column contracts
and every built-in definition: export/tables.py.
"""
from __future__ import annotations

import hashlib
import re
import threading

from collections.abc import Callable, Iterable, Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc


NS_PER_SECOND = 1_000_000_000
FEATURE_OF_COLUMN = "feature_of_column"
BLOCK_ROWS = 1_000_000  # events per block of learners: bounds the working memory, not the speed


@dataclass(frozen=True)
class FeatureSettings:
    """What counts as an error, a success, a help request and a rapid action."""

    top_actions: int = 10
    rapid_seconds: float = 2.0  # a lab's choice, not a published constant
    error_outcomes: tuple[str, ...] = ("incorrect",)
    success_outcomes: tuple[str, ...] = ("correct",)
    help_actions: tuple[str, ...] = ("hint", "help", "help_request", "hint_request")
    wheel_spinning_attempts: int = 10  # common practice: ten attempts without mastery


@dataclass(frozen=True)
class CodedColumn:
    """A string column as integer codes and the code names.

    Code -1 is a missing value; a code whose name is "" is blank (no item, no skill ...).
    Blank codes are kept as codes rather than rewritten row by row: one pass less over
    the log per column.
    """

    codes: np.ndarray
    names: np.ndarray

    def present(self, codes: np.ndarray) -> np.ndarray:
        """Boolean per code value: neither missing nor blank."""
        table = np.append(self.names != "", False)  # code -1 reads the trailing False
        return table[codes]

    def counts(self, rows: np.ndarray | None = None) -> np.ndarray:
        """How many of ``rows`` (or all rows) have each code (missing and blank left out)."""
        return np.bincount((self.codes if rows is None else self.codes[rows]) + 1, minlength=len(self.names) + 1)[1:] * (self.names != "")

    def mask(self, wanted: tuple[str, ...], rows: np.ndarray | None = None) -> np.ndarray:
        """Boolean per row (all rows, or just ``rows``): the value is one of ``wanted``."""
        codes = self.codes if rows is None else self.codes[rows]
        matching = np.flatnonzero(np.isin(self.names, np.asarray(wanted, dtype=object)))
        if len(matching) <= 2:  # a comparison or two is cheaper than a table lookup per row
            result = np.zeros(len(codes), dtype=bool)
            for code in matching:
                result |= codes == code
            return result
        lookup = np.zeros(len(self.names) + 1, dtype=bool)  # code -1 reads the trailing False
        lookup[matching] = True
        return lookup[codes]


def code_column(values: pd.Series | pa.ChunkedArray) -> CodedColumn:
    """Codes without re-hashing when the column is already dictionary-encoded.

    Accepts a pandas column or an Arrow column (Arrow dictionary chunks are unified, which
    is far cheaper than converting them to a pandas categorical first).
    """
    if isinstance(values, pa.ChunkedArray):
        if not pa.types.is_dictionary(values.type):
            values = pc.dictionary_encode(values)
        values = pa.table({"column": values}).unify_dictionaries().column("column")
        chunks = [
            (pc.fill_null(chunk.indices, -1) if chunk.null_count else chunk.indices).to_numpy(zero_copy_only=False)
            for chunk in values.chunks
        ]
        codes = np.concatenate(chunks).astype(np.int32, copy=False) if chunks else np.zeros(0, np.int32)
        names = values.chunk(0).dictionary.to_numpy(zero_copy_only=False) if values.num_chunks else np.zeros(0, object)
        names = np.asarray(names, dtype=object)
    elif isinstance(values.dtype, pd.CategoricalDtype):
        codes = values.cat.codes.to_numpy().astype(np.int32, copy=False)
        names = values.cat.categories.to_numpy(dtype=object)
    else:
        factorized, uniques = pd.factorize(values)
        codes = factorized.astype(np.int32, copy=False)
        names = np.asarray(uniques, dtype=object)
    return CodedColumn(codes, names)


def take_rows(column: pd.Series | pa.ChunkedArray, rows: slice | np.ndarray | None) -> pd.Series | pa.ChunkedArray:
    """``column``'s values at ``rows`` (a slice of positions, positions, or None for all), in that order."""
    if rows is None:
        return column
    if not isinstance(column, pa.ChunkedArray):
        return column.iloc[rows]
    if isinstance(rows, slice):
        return column.slice(rows.start, rows.stop - rows.start)
    # Arrow's take on a chunked column joins all its chunks first (the whole log per
    # block); take from each chunk the rows it holds, then put them in order.
    bounds = np.cumsum([0] + [len(chunk) for chunk in column.chunks])
    chunk = np.searchsorted(bounds, rows, "right") - 1
    order = np.argsort(chunk, kind="stable")
    ordered, held = rows[order], np.bincount(chunk, minlength=column.num_chunks)
    ends = np.cumsum(held)
    pieces = [column.chunk(number).take(pa.array(ordered[end - count:end] - bounds[number]))
              for number, (count, end) in enumerate(zip(held, ends)) if count]
    joined = pa.concat_arrays(pieces) if len(pieces) > 1 else (pieces[0] if pieces else column.chunk(0).slice(0, 0))
    return pa.chunked_array([joined.take(pa.array(np.argsort(order)))], type=column.type)


class _Coded:
    """A string column of the log as a view attribute, coded on first use: features that
    do not need it never read it (and a caller may leave it out of the table)."""

    def __set_name__(self, owner: type, name: str) -> None:
        self.name = name

    def __get__(self, view: WindowEvents | None, owner: type) -> CodedColumn:
        return view.coded(self.name)


@dataclass
class WindowEvents:
    """Part of the log in learner-then-time order and, per window, where its rows lie.

    The log part is ``events`` at ``rows`` (a slice or positions of ``events``' rows, None
    for all of them already in order); its row i is position i below.  Windows are held in
    log order (``window_order`` maps back to the caller's order: position i here is the
    caller's window ``window_order[i]``).
    Per window (arrays of length W): ``learner_start`` (first row of the learner, or 0
    when the learner has no events), ``learner_stop`` (row after the learner's last),
    ``first`` (first row at or after window start),
    ``stop`` (first row at or after window end: the window's rows are ``first:stop``),
    ``start_ns``, ``end_ns``.  ``member`` lists the window rows window after
    window; window w's rows are ``member[offsets[w] : offsets[w] + counts[w]]``.
    """

    settings: FeatureSettings
    events: pd.DataFrame | pa.Table
    rows: slice | np.ndarray | None
    time_ns: np.ndarray
    learner_codes: np.ndarray
    window_order: np.ndarray
    learner_start: np.ndarray
    learner_stop: np.ndarray
    first: np.ndarray
    stop: np.ndarray
    start_ns: np.ndarray
    end_ns: np.ndarray

    def __post_init__(self) -> None:
        self._coded_columns: dict[str, CodedColumn] = {}
        self._coding = threading.Lock()

    def coded(self, name: str) -> CodedColumn:
        """An EVENTS string column as codes, in this view's row order (coded once; thread-safe)."""
        with self._coding:
            if name not in self._coded_columns:
                self._coded_columns[name] = code_column(take_rows(self.events[name], self.rows))
            return self._coded_columns[name]

    action = _Coded()
    outcome = _Coded()
    item = _Coded()
    skill = _Coded()

    def counts_by_value(self, name: str, prefix: str, choose: Callable[[pd.Series], list]) -> ColumnsByValue:
        """Per window, how many of its rows have each (non-blank) value of column ``name``;
        ``choose`` picks the columns from the sums over every block's windows."""
        column = self.coded(name)
        codes = column.codes[self.member]
        keep = column.present(codes)
        width = len(column.names) + 1
        pairs, counts = np.unique(self.member_window[keep] * width + codes[keep], return_counts=True)
        return ColumnsByValue(prefix=prefix, window=pairs // width, value=column.names[pairs % width],
                              count=counts, choose=choose)

    def rows_between(self, low: int, high: int) -> slice | np.ndarray:
        """``events``' rows of this (whole log's) view's rows ``low:high``."""
        return slice(low, high) if self.rows is None else self.rows[low:high]

    def blocks(self, block_rows: int) -> Iterator[WindowEvents]:
        """This view cut into views of whole learners, about ``block_rows`` rows each, in
        log order; only blocks with windows (the first block holds learners without events)."""
        starts = _run_starts(self.learner_codes)
        block_of_run = starts // max(int(block_rows), 1)
        lows = starts[np.append(True, block_of_run[1:] != block_of_run[:-1])] if len(starts) else np.zeros(1, np.int64)
        highs = np.append(lows[1:], len(self.time_ns))
        window_lows = np.searchsorted(self.learner_start, lows, "left")
        window_lows[0] = 0
        window_highs = np.append(window_lows[1:], len(self.first))
        chosen = [block for block in zip(lows, highs, window_lows, window_highs) if block[3] > block[2]]
        for low, high, window_low, window_high in chosen or [(0, 0, 0, 0)]:
            yield self.block(int(low), int(high), int(window_low), int(window_high))

    def block(self, low: int, high: int, window_low: int, window_high: int) -> WindowEvents:
        """The view of rows ``low:high`` and the windows at ``window_low:window_high`` (their learners' own)."""
        windows = slice(window_low, window_high)
        return WindowEvents(
            settings=self.settings, events=self.events, rows=self.rows_between(low, high), time_ns=self.time_ns[low:high],
            learner_codes=self.learner_codes[low:high], window_order=self.window_order[windows],
            learner_start=self.learner_start[windows] - low, learner_stop=self.learner_stop[windows] - low,
            first=self.first[windows] - low, stop=self.stop[windows] - low, start_ns=self.start_ns[windows],
            end_ns=self.end_ns[windows])

    @cached_property
    def counts(self) -> np.ndarray:
        return self.stop - self.first

    @cached_property
    def offsets(self) -> np.ndarray:
        return np.cumsum(self.counts) - self.counts

    @cached_property
    def member(self) -> np.ndarray:
        return _member_rows(self.first, self.counts, self.offsets)

    @cached_property
    def member_window(self) -> np.ndarray:
        """Window number of each member row."""
        return np.repeat(np.arange(len(self.counts), dtype=np.int64), self.counts)

    @cached_property
    def member_time_ns(self) -> np.ndarray:
        return self.time_ns[self.member]

    @cached_property
    def previous_gap_ns(self) -> np.ndarray:
        """Per member row: ns since the learner's previous event (NaN for their first)."""
        member = self.member
        has_previous = member > np.repeat(self.learner_start, self.counts)
        previous = self.time_ns[np.maximum(member - 1, 0)]
        return np.where(has_previous, (self.member_time_ns - previous).astype(np.float64), np.nan)

    @cached_property
    def internal_gap_ns(self) -> np.ndarray:
        """Per member row: ns since the previous event *inside the window* (NaN for the first)."""
        gaps = self.previous_gap_ns.copy()
        gaps[self.offsets[self.counts > 0]] = np.nan
        return gaps

    @cached_property
    def attempt_outcomes(self) -> tuple[str, ...]:
        return self.settings.error_outcomes + self.settings.success_outcomes

    @cached_property
    def attempt_rows(self) -> np.ndarray:
        """Log rows that are attempts (error or success outcome), in log order."""
        return np.flatnonzero(self.outcome.mask(self.attempt_outcomes))

    @cached_property
    def error_rows(self) -> np.ndarray:
        """Log rows with an error outcome, in log order."""
        return np.flatnonzero(self.outcome.mask(self.settings.error_outcomes))

    def reduce_members(self, ufunc: np.ufunc, values: np.ndarray, empty: float) -> np.ndarray:
        """``ufunc`` over each window's member values; ``empty`` for windows without rows."""
        out = np.full(len(self.counts), empty, dtype=np.float64)
        if len(values) == 0:
            return out
        padded = np.append(values.astype(np.float64), empty)
        bounds = np.append(self.offsets, len(values))
        reduced = ufunc.reduceat(padded, bounds)[:-1]
        nonempty = self.counts > 0
        out[nonempty] = reduced[nonempty]
        return out

    def count_members(self, member_mask: np.ndarray) -> np.ndarray:
        """How many of each window's member rows satisfy a per-member condition."""
        return self.reduce_members(np.add, member_mask, 0.0)

    def count_in_windows(self, column: CodedColumn, wanted: tuple[str, ...]) -> np.ndarray:
        """How many rows of each window have one of the ``wanted`` values in ``column``."""
        return self.count_members(column.mask(wanted, self.member))

    def count_before_window_end(self, rows: np.ndarray) -> np.ndarray:
        """How many of ``rows`` (log rows in log order) lie between the learner's first row and window end.

        A prefix count: searching the qualifying rows at both ends is the difference of
        a cumulative sum, without building one over the whole log.
        """
        return (np.searchsorted(rows, self.stop) - np.searchsorted(rows, self.learner_start)).astype(np.float64)


@dataclass(frozen=True)
class ColumnsByValue:
    """A feature's per-window counts of every value of a string column, in one block: the
    columns are chosen only when every block is in (``choose`` gets value -> count over
    all windows, blank and missing left out, and returns the values that get a column,
    in column order), named ``prefix_<value>`` (``column_names``).  Entries: window
    (position in the block's view), value (its text) and count, only counts above zero."""

    prefix: str
    window: np.ndarray
    value: np.ndarray
    count: np.ndarray
    choose: Callable[[pd.Series], list]


def _member_rows(first: np.ndarray, counts: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """Rows ``first[w]:first[w] + counts[w]`` of every window, one window after another."""
    return np.repeat(first - offsets, counts) + np.arange(int(counts.sum()), dtype=np.int64)


FeatureFunction = Callable[[WindowEvents], Mapping[str, np.ndarray] | ColumnsByValue]
FEATURES: dict[str, FeatureFunction] = {}
"""The registry: feature name -> function returning {column: per-window values}, or a
ColumnsByValue when the data choose its columns."""


def feature(function: FeatureFunction) -> FeatureFunction:
    """Register a feature function under its own name (decorator)."""
    FEATURES[function.__name__] = function
    return function


def _ratio(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(denominator > 0, numerator / np.where(denominator > 0, denominator, 1), np.nan)


@feature
def activity(view: WindowEvents) -> dict[str, np.ndarray]:
    """event_count and events_per_minute in the window."""
    minutes = (view.end_ns - view.start_ns) / (60 * NS_PER_SECOND)
    count = view.counts.astype(np.float64)
    return {"event_count": count, "events_per_minute": _ratio(count, minutes)}


@feature
def action_counts(view: WindowEvents) -> ColumnsByValue:
    """action_<name>: events of each of the top-K actions (by events in all windows) in the window."""
    top = view.settings.top_actions

    def most_frequent(totals: pd.Series) -> list:  # only window events choose the columns: nothing else shapes the table
        ranked = sorted(zip(totals.index, totals.to_numpy()), key=lambda pair: (-pair[1], str(pair[0])))
        return [value for value, _ in ranked[:top]]

    return view.counts_by_value("action", "action", most_frequent)


@feature
def outcome_counts(view: WindowEvents) -> ColumnsByValue:
    """outcome_<name>: events with each (non-empty) outcome seen in any window, in the window."""
    return view.counts_by_value("outcome", "outcome", lambda totals: sorted(totals.index, key=str))


def column_names(prefix: str, values: list[str]) -> list[str]:
    """``prefix_<value>`` column names a data scientist can type.

    An IRI (an xAPI verb id such as http://adlnet.gov/expapi/verbs/attempted) is named by
    its last path segment; anything but letters, digits and _ becomes _.  When two values
    would get the same name, each keeps a short hash of its full text so none is lost.
    """
    short = [re.sub(r"\W+", "_", value.rstrip("/").rsplit("/", 1)[-1].rsplit("#", 1)[-1]).strip("_").lower() or "blank"
             for value in values]
    clashes = {name for name in short if short.count(name) > 1}
    return [f"{prefix}_{name}" if name not in clashes
            else f"{prefix}_{name}_{hashlib.sha1(value.encode()).hexdigest()[:6]}"
            for name, value in zip(short, values)]


@feature
def errors_and_help(view: WindowEvents) -> dict[str, np.ndarray]:
    """error_rate (errors / attempts) and help_requests (help actions) in the window."""
    attempts = view.count_in_windows(view.outcome, view.attempt_outcomes)
    errors = view.count_in_windows(view.outcome, view.settings.error_outcomes)
    help_requests = view.count_in_windows(view.action, view.settings.help_actions)
    return {"error_rate": _ratio(errors, attempts), "help_requests": help_requests}


@feature
def pacing(view: WindowEvents) -> dict[str, np.ndarray]:
    """seconds_since_previous, gap mean/median/max, idle_longest_s and rapid_share."""
    second = float(NS_PER_SECOND)
    counts = view.counts
    previous = view.first - 1
    has_previous = previous >= view.learner_start
    previous_time = np.zeros(len(counts), dtype=np.int64)
    previous_time[has_previous] = view.time_ns[previous[has_previous]]
    since_previous = np.where(has_previous, (view.start_ns - previous_time) / second, np.nan)

    nonempty = counts > 0
    first_time = np.zeros(len(counts), dtype=np.int64)
    last_time = np.zeros(len(counts), dtype=np.int64)
    first_time[nonempty] = view.member_time_ns[view.offsets[nonempty]]
    last_time[nonempty] = view.member_time_ns[view.offsets[nonempty] + counts[nonempty] - 1]
    gap_mean = _ratio((last_time - first_time).astype(np.float64), (counts - 1).astype(np.float64))
    gaps = view.internal_gap_ns
    gap_max = view.reduce_members(np.fmax, gaps, np.nan)
    gap_median = _segment_median(gaps, view.member_window, view.offsets, counts - 1)
    edges = np.fmax(first_time - view.start_ns, view.end_ns - last_time).astype(np.float64)
    idle = np.where(nonempty, np.fmax(edges, gap_max), view.end_ns - view.start_ns)
    rapid = view.count_members(view.previous_gap_ns < view.settings.rapid_seconds * second)
    return {
        "seconds_since_previous": since_previous,
        "gap_mean_s": gap_mean / second,
        "gap_median_s": gap_median / second,
        "gap_max_s": gap_max / second,
        "idle_longest_s": idle / second,
        "rapid_share": _ratio(rapid, counts.astype(np.float64)),
    }


def _segment_median(values: np.ndarray, segment: np.ndarray, offsets: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Median of each segment's non-NaN values; ``valid`` = how many are not NaN."""
    out = np.full(len(offsets), np.nan)
    if len(values) == 0:
        return out
    ordered = values[np.lexsort((values, segment))]  # NaN sorts last inside each segment
    has = valid > 0
    low = offsets[has] + (valid[has] - 1) // 2
    high = offsets[has] + valid[has] // 2
    out[has] = (ordered[low] + ordered[high]) / 2
    return out


@feature
def distinct_items(view: WindowEvents) -> dict[str, np.ndarray]:
    """distinct_items: distinct non-empty items touched in the window."""
    codes = view.item.codes[view.member].astype(np.int64)
    keep = view.item.present(codes)
    pairs = np.sort(view.member_window[keep] * (len(view.item.names) + 1) + codes[keep])
    distinct = pairs[np.append(True, pairs[1:] != pairs[:-1])] if len(pairs) else pairs  # np.unique hashes: slower here
    per_window = np.bincount(distinct // (len(view.item.names) + 1), minlength=len(view.counts))
    return {"distinct_items": per_window.astype(np.float64)}


@feature
def persistence(view: WindowEvents) -> dict[str, np.ndarray]:
    """attempts_without_success on the current skill at window end, and the wheel_spinning flag."""
    counter = np.zeros(len(view.counts))
    attempts = view.attempt_rows
    skill = view.skill.codes[attempts]
    if (view.skill.names == "").any() or skill.min(initial=0) < 0:  # skip the filter when every row has a skill
        with_skill = view.skill.present(skill)
        attempts, skill = attempts[with_skill], skill[with_skill]
    latest = np.searchsorted(attempts, view.stop) - 1  # the learner's latest attempt before window end
    learner_first = np.searchsorted(attempts, view.learner_start)
    valid = latest >= learner_first
    if valid.any():
        counter[valid] = _attempts_since_success(view, attempts, skill, latest[valid], learner_first[valid])
    return {
        "attempts_without_success": counter,
        "wheel_spinning": (counter >= view.settings.wheel_spinning_attempts).astype(np.float64),
    }


def _attempts_since_success(
    view: WindowEvents, attempts: np.ndarray, skill: np.ndarray, latest: np.ndarray, learner_first: np.ndarray,
) -> np.ndarray:
    """Attempts in a row on the skill of attempt ``latest`` since the learner's last success on it.

    ``attempts`` are log rows and ``skill`` their skill codes; ``latest`` and
    ``learner_first`` index into them.  A stable sort by skill keeps log order inside
    each skill, so one learner's attempts on one skill are a contiguous stretch of the
    sorted order; the answer is the distance from the latest attempt back to the last
    success (or to the stretch's start).
    """
    for small in (np.int8, np.int16):  # numpy sorts 8- and 16-bit keys by radix: linear time
        if len(view.skill.names) <= np.iinfo(small).max:
            skill = skill.astype(small)
            break
    order = np.argsort(skill, kind="stable")
    bounds = np.zeros(len(view.skill.names) + 1, dtype=np.int64)
    np.cumsum(np.bincount(skill, minlength=len(view.skill.names)), out=bounds[1:])
    current = skill[latest].astype(np.int64)
    by_skill = np.lexsort((latest, current))  # queries in sorted-array order: the searches walk forwards
    latest, learner_first, current = latest[by_skill], learner_first[by_skill], current[by_skill]
    low, high = bounds[current], bounds[current + 1]
    position = _search_runs(order, low, high, latest)
    stretch_start = _search_runs(order, low, high, learner_first)
    success = view.outcome.mask(view.settings.success_outcomes, attempts)
    successes = np.flatnonzero(success[order])
    before = np.searchsorted(successes, position, side="right") - 1
    last_success = np.where(before >= 0, successes[np.maximum(before, 0)] if len(successes) else -1, -1)
    streak = np.empty(len(latest))
    streak[by_skill] = position - np.maximum(last_success, stretch_start - 1)
    return streak


@feature
def history(view: WindowEvents) -> dict[str, np.ndarray]:
    """history_attempts and history_error_rate over the learner's log before window end."""
    attempts = view.count_before_window_end(view.attempt_rows)
    errors = view.count_before_window_end(view.error_rows)
    return {"history_attempts": attempts, "history_error_rate": _ratio(errors, attempts)}


def _search_runs(values: np.ndarray, low: np.ndarray, high: np.ndarray, target: np.ndarray) -> np.ndarray:
    """First index in [low, high) whose value >= target (``high`` when none).

    ``values`` is sorted inside each [low, high) run (a learner's times, a skill's rows);
    one vectorised bisection searches every run at once.  (A single
    ``searchsorted`` on a combined learner*length+time int64 key would overflow once the
    learners' log lengths add up to ~292 years of nanoseconds, which a large study reaches.)
    """
    low = low.copy()
    high = high.copy()
    last = max(len(values) - 1, 0)
    while True:
        active = low < high
        if not active.any():
            return low
        middle = (low + high) // 2
        before = active & (values[np.minimum(middle, last)] < target)
        low = np.where(before, middle + 1, low)
        high = np.where(active & ~before, middle, high)


def index_windows(events: pd.DataFrame | pa.Table, windows: pd.DataFrame, settings: FeatureSettings,
                  learner: CodedColumn | None = None) -> WindowEvents:
    """Sort the log once (if it is not already) and locate every window's rows.

    ``events``: EVENTS columns learner and time_ns, and those of action, outcome, item,
    skill that the features use (pandas or Arrow; Arrow dictionary columns are the
    cheapest input); ``learner``: its learner column as codes, when the caller has them.
    ``windows``: log_id, start_ns (inclusive), end_ns (exclusive), as sync/ made them.
    """
    learner = code_column(events["learner"]) if learner is None else learner
    time_ns = np.asarray(events["time_ns"], dtype=np.int64)
    starts = _run_starts(learner.codes)
    row_order = None
    if not _in_log_order(learner.codes, time_ns, starts):
        row_order = np.lexsort((time_ns, learner.codes))
        time_ns = time_ns[row_order]
        learner = CodedColumn(learner.codes[row_order], learner.names)
        starts = _run_starts(learner.codes)
    run_start = np.zeros(len(learner.names) + 1, dtype=np.int64)
    run_stop = np.zeros(len(learner.names) + 1, dtype=np.int64)
    if len(time_ns):
        run_start[learner.codes[starts]] = starts
        run_stop[learner.codes[starts]] = np.append(starts[1:], len(time_ns))
    # Object indexes on both sides: pandas would otherwise turn each into Arrow text first.
    window_learner = pd.Index(learner.names, dtype=object).get_indexer(
        pd.Index(windows["log_id"].to_numpy(dtype=object), dtype=object))
    learner_start = run_start[window_learner]  # -1 (unknown learner) reads the empty last run
    learner_stop = run_stop[window_learner]
    window_start = windows["start_ns"].to_numpy(dtype=np.int64)
    window_end = windows["end_ns"].to_numpy(dtype=np.int64)
    # Windows in log order, so that every search below walks memory forwards.
    window_order = np.lexsort((window_start, learner_start))
    learner_start, learner_stop = learner_start[window_order], learner_stop[window_order]
    window_start, window_end = window_start[window_order], window_end[window_order]
    first = _search_runs(time_ns, learner_start, learner_stop, window_start)
    stop = _search_runs(time_ns, first, learner_stop, window_end)
    return WindowEvents(
        settings=settings, events=events, rows=row_order, time_ns=time_ns, learner_codes=learner.codes,
        window_order=window_order, learner_start=learner_start, learner_stop=learner_stop, first=first, stop=stop,
        start_ns=window_start, end_ns=window_end,
    )


def _run_starts(learner_codes: np.ndarray) -> np.ndarray:
    """First row of every run of equal learner codes."""
    if len(learner_codes) == 0:
        return np.zeros(0, dtype=np.int64)
    return np.append(0, np.flatnonzero(learner_codes[1:] != learner_codes[:-1]) + 1)


def _in_log_order(learner_codes: np.ndarray, time_ns: np.ndarray, starts: np.ndarray) -> bool:
    """Each learner is one run, and time never goes back inside a run (EVENTS' promise, checked)."""
    run_learners = learner_codes[starts]
    if len(np.unique(run_learners)) != len(run_learners):
        return False
    backwards = np.flatnonzero(time_ns[1:] < time_ns[:-1]) + 1
    return bool(np.isin(backwards, starts).all())


def compute_features(
    events: pd.DataFrame | pa.Table,
    windows: pd.DataFrame,
    settings: FeatureSettings = FeatureSettings(),
    features: Mapping[str, FeatureFunction] = FEATURES,
    threads: int = 2,
    block_rows: int = BLOCK_ROWS,
) -> pd.DataFrame:
    """One row per window (``windows``' index): start_ns, end_ns, then every feature column.

    ``frame.attrs[FEATURE_OF_COLUMN]`` maps each feature column to the name of the
    function that computed it (how the manifest finds a lab feature's definition).

    The features run on blocks of whole learners of about ``block_rows`` events (the
    result does not depend on it), each block's feature functions on ``threads`` threads
    (numpy releases the GIL in its loops).  The arrays they share are cached properties
    of the block's view: built once under cached_property's lock (Python 3.11); on later
    Pythons two threads may at worst both build the same array.
    """
    whole = index_windows(events, windows, settings)
    return _run_features(whole.blocks(block_rows), windows.index, features, threads)


def compute_features_from_blocks(
    blocks: Iterable[pa.Table | pa.RecordBatch],
    windows: pd.DataFrame,
    settings: FeatureSettings = FeatureSettings(),
    features: Mapping[str, FeatureFunction] = FEATURES,
    threads: int = 2,
) -> pd.DataFrame:
    """What ``compute_features`` returns for all ``blocks`` together, bit for bit, holding
    one block of events at a time (and the per-window results).

    Each block holds whole learners (every event of a learner is in one block), with the
    columns ``index_windows`` reads; blocks in learner-then-time order cost no sort.
    Windows whose learner no block holds are computed at the end on an empty block, as
    one pass computes them.  Raises ValueError when a window's learner is in two blocks.
    """
    return _run_features(_block_views(_read_ahead(blocks), windows, settings), windows.index, features, threads)


def _read_ahead(blocks: Iterable[pa.Table | pa.RecordBatch]) -> Iterator[pa.Table | pa.RecordBatch]:
    """The blocks in order, the next one read on a thread while the features of this one run
    (Arrow reads without Python's lock): one block more in memory, the reading hidden."""
    iterator = iter(blocks)
    with ThreadPoolExecutor(max_workers=1) as reader:
        pending = reader.submit(next, iterator, None)
        while (block := pending.result()) is not None:
            pending = reader.submit(next, iterator, None)
            yield block
            del block


NO_EVENTS = pa.table({"learner": pa.array([], pa.string()), "time_ns": pa.array([], pa.int64()),
                      **{name: pa.array([], pa.string()) for name in ("action", "outcome", "item", "skill")}})


def _block_views(blocks: Iterable[pa.Table | pa.RecordBatch], windows: pd.DataFrame,
                 settings: FeatureSettings) -> Iterator[WindowEvents]:
    """One view per block that holds a window's learner (window_order: positions in ``windows``),
    then one for the windows of learners no block held (or for none, when no view came)."""
    windows = pd.DataFrame({"log_id": pd.Series(windows["log_id"].to_numpy(dtype=object), dtype=object),  # once, not per block
                            "start_ns": windows["start_ns"].to_numpy(), "end_ns": windows["end_ns"].to_numpy()})
    learner_of_window, learners = pd.factorize(windows["log_id"], use_na_sentinel=False)
    by_learner = np.argsort(learner_of_window, kind="stable")  # windows grouped by learner
    bounds = np.searchsorted(learner_of_window[by_learner], np.arange(len(learners) + 1))
    done, empty, viewed = np.zeros(len(learners), dtype=bool), NO_EVENTS, False
    for block in blocks:
        table = block if isinstance(block, pa.Table) else pa.Table.from_batches([block])
        empty = table.slice(0, 0)
        if table.num_rows == 0:
            continue
        learner = code_column(table["learner"])
        codes = np.unique(learner.codes[_run_starts(learner.codes)])
        present = learner.names[codes[codes >= 0]]  # (-1: a missing learner, never a window's)
        hits = learners.get_indexer(pd.Index(present, dtype=object))
        hits = hits[hits >= 0]
        if done[hits].any():
            raise ValueError(f"learner {learners[hits[done[hits]][0]]!r} has events in two blocks; "
                             "each block must hold whole learners")
        done[hits] = True
        if len(hits):
            counts = bounds[hits + 1] - bounds[hits]
            positions = by_learner[_member_rows(bounds[hits], counts, np.cumsum(counts) - counts)]
            viewed = True
            yield _positioned(index_windows(table, windows.iloc[positions], settings, learner), positions)
        del block, table, learner, codes  # before the next block arrives
    rest = np.flatnonzero(~done[learner_of_window])  # (a window without log_id too: no block holds it)
    if len(rest) or not viewed:
        yield _positioned(index_windows(empty, windows.iloc[rest], settings), rest)


def _positioned(view: WindowEvents, positions: np.ndarray) -> WindowEvents:
    """``view`` with its window order mapped through ``positions`` (its windows' places in the caller's)."""
    view.window_order = positions[view.window_order]
    return view


def _run_features(views: Iterable[WindowEvents], index: pd.Index, features: Mapping[str, FeatureFunction],
                  threads: int) -> pd.DataFrame:
    """Every feature on every view, the views' columns joined in the caller's window order
    (``index``); ColumnsByValue results get their columns when every view is in."""
    layout: list | None = None
    parts: dict[object, list] = {}
    places: list[np.ndarray] = []
    source: dict[str, str] = {}
    with ThreadPoolExecutor(max_workers=threads) as pool:
        for view in views:
            columns: dict[object, np.ndarray | ColumnsByValue] = {"start_ns": view.start_ns, "end_ns": view.end_ns}
            for name, result in zip(features, pool.map(lambda function: function(view), features.values())):
                if isinstance(result, ColumnsByValue):
                    columns[(ColumnsByValue, name)] = result
                    continue
                columns.update(result)
                source.update(dict.fromkeys(result, name))
            if layout is not None and list(columns) != layout:
                raise ValueError(f"feature columns differ between blocks of learners ({sorted(map(str, set(columns) ^ set(layout)))}); "
                                 "a feature whose values choose its columns returns view.counts_by_value")
            layout = list(columns)
            places.append(view.window_order)
            for key, values in columns.items():
                parts.setdefault(key, []).append(values)
            del view, columns
    where = np.concatenate(places)
    restored: dict[str, np.ndarray] = {}
    for key in layout:
        if isinstance(key, tuple):
            chosen = _chosen_columns(parts[key], places, len(index))
            restored.update(chosen)
            source.update(dict.fromkeys(chosen, key[1]))
            continue
        joined = np.concatenate(parts[key]) if len(parts[key]) > 1 else parts[key][0]
        restored[key] = np.empty_like(joined)
        restored[key][where] = joined
    frame = pd.DataFrame(restored, index=index)
    frame.attrs[FEATURE_OF_COLUMN] = source  # output column -> the feature function that made it
    return frame


def _chosen_columns(parts: list[ColumnsByValue], places: list[np.ndarray], windows: int) -> dict[str, np.ndarray]:
    """The columns of one ColumnsByValue feature over every view: values chosen from their
    sums over all windows, counts at the caller's window positions (``places`` per view)."""
    value = np.concatenate([part.value for part in parts]).astype(object)
    count = np.concatenate([part.count for part in parts])
    window = np.concatenate([place[part.window] for part, place in zip(parts, places)])
    totals = pd.Series(count, dtype=np.int64).groupby(pd.Index(value, dtype=object), sort=False).sum()
    chosen = parts[0].choose(totals)
    table = np.zeros((windows, len(chosen)))
    slot = pd.Index(chosen, dtype=object).get_indexer(pd.Index(value, dtype=object)) if len(chosen) else np.full(len(value), -1)
    keep = slot >= 0
    table[window[keep], slot[keep]] = count[keep]
    names = column_names(parts[0].prefix, [str(chosen_value) for chosen_value in chosen])
    return {name: table[:, column] for column, name in enumerate(names)}
