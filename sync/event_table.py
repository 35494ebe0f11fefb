"""Assembling the EVENTS table (sync/tables.py) from a reader's columns: one home for
outcome normalisation, dictionary encoding and the sort order."""
from __future__ import annotations

import numpy as np
import pandas as pd

from sync.tables import EVENT_COLUMNS

# Outcome words seen in learning-system logs (common practice), mapped to EVENTS.outcome.
OUTCOME_WORDS: dict[str, str] = {
    **dict.fromkeys(("correct", "right", "true", "1", "yes", "pass", "passed", "success", "ok"), "correct"),
    **dict.fromkeys(("incorrect", "wrong", "false", "0", "no", "fail", "failed", "failure", "error"), "incorrect"),
    **dict.fromkeys(("completed", "complete", "done", "finished"), "completed"),
}
CATEGORY_COLUMNS: tuple[str, ...] = ("learner", "action", "outcome", "item", "skill", "source")


def normalise_outcomes(values: pd.Categorical) -> pd.Categorical:
    """Known outcome words -> correct/incorrect/completed; missing -> ""; others lower-cased.

    Works on the distinct values only, so it stays cheap on millions of rows.
    """
    words = [str(word).strip().lower() for word in values.categories]
    mapped = np.array([OUTCOME_WORDS.get(word, word) for word in words] + [""], dtype=object)
    categories, inverse = np.unique(mapped, return_inverse=True)
    codes = np.asarray(values.codes)
    new_codes = inverse[np.where(codes >= 0, codes, len(words))]
    return pd.Categorical.from_codes(new_codes, categories=categories, validate=False)


def _category(values, length: int) -> pd.Categorical:
    if values is None:
        return pd.Categorical.from_codes(np.zeros(length, dtype=np.int8), categories=[""])
    series = pd.Series(values)
    if isinstance(series.dtype, pd.CategoricalDtype):
        # Codes and categories directly: pandas' own add_categories walks Arrow-backed
        # categories one by one, which costs seconds for a platform's 20,000 learner ids.
        # Words trimmed as plain text is (" n-007 " is learner n-007); words that become equal merge.
        trimmed = np.array([str(word).strip() for word in series.cat.categories], dtype=object)
        codes = series.cat.codes.to_numpy()
        categories = trimmed
        if len(trimmed):
            categories, merged = np.unique(trimmed, return_inverse=True)
            codes = np.where(codes >= 0, merged.reshape(-1)[np.maximum(codes, 0)], -1)
        blank = np.flatnonzero(categories == "")
        if blank.size == 0:
            categories = np.append(categories, "")
            blank = np.array([len(categories) - 1])
        if (codes < 0).any():
            codes = np.where(codes < 0, blank[0], codes)
        return pd.Categorical.from_codes(codes, categories=categories, validate=False)
    return pd.Categorical(series.astype("str").fillna("").str.strip())


def build_events(*, learner, time_ns: np.ndarray, action=None, outcome=None, item=None, skill=None,
                 duration_s=None, source: str, source_row: np.ndarray) -> pd.DataFrame:
    """One reader's columns -> EVENTS (unsorted); missing optional roles become ""/NaN."""
    length = len(time_ns)
    outcome_values = normalise_outcomes(_category(outcome, length))
    frame = pd.DataFrame({
        "learner": _category(learner, length),
        "time_ns": np.asarray(time_ns, dtype=np.int64),
        "action": _category(action, length),
        "outcome": outcome_values,
        "item": _category(item, length),
        "skill": _category(skill, length),
        "duration_s": np.full(length, np.nan) if duration_s is None else np.asarray(duration_s, dtype=np.float64),
        "source": pd.Categorical.from_codes(np.zeros(length, dtype=np.int8), categories=[source]),
        "source_row": np.asarray(source_row, dtype=np.int64),
    })
    return frame[list(EVENT_COLUMNS)]


def combine_events(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """Concatenate readers' tables (categories unioned) and sort by (learner, time_ns)."""
    if not parts:
        return empty_events()
    if len(parts) == 1:
        combined = parts[0]
    else:
        columns = {}
        for name in EVENT_COLUMNS:
            if name in CATEGORY_COLUMNS:
                columns[name] = pd.api.types.union_categoricals([part[name] for part in parts])
            else:
                columns[name] = np.concatenate([part[name].to_numpy() for part in parts])
        combined = pd.DataFrame(columns)
    order = order_by_learner_and_time(combined["learner"], combined["time_ns"].to_numpy())
    return (combined if order is None else combined.take(order)).reset_index(drop=True)


def order_by_learner_and_time(learner: pd.Series, time_ns: np.ndarray) -> np.ndarray | None:
    """The stable row order by learner (as text), then time; None when the rows are in it
    already (a cached log comes sorted: no sort at all).  ``learner`` is categorical."""
    key = _learner_sort_key(learner)
    return None if _in_order(key, time_ns) else _learner_time_order(key, time_ns)


def _learner_time_order(key: np.ndarray, time_ns: np.ndarray) -> np.ndarray:
    """The stable row order by (learner, time); ``key`` ranks the learners (as their text sorts).

    Rows in time order (a log as most systems write it) need one stable pass over the
    learner key, small integers that numpy sorts by radix.  Otherwise one stable sort of
    a single int64 key (learner rank in the high bits, time since the earliest event in the
    low ones) when both fit: numpy's timsort then merges the runs that are already in order
    (files of a dataset, each sorted by learner then time) instead of sorting every row.
    Failing both, two stable passes (time, then learner).
    """
    if np.all(time_ns[1:] >= time_ns[:-1]):
        return np.argsort(key, kind="stable")
    low = int(time_ns.min())
    time_bits = (int(time_ns.max()) - low).bit_length()
    if time_bits + int(key.max()).bit_length() <= 62:
        return np.argsort((key.astype(np.int64) << time_bits) | (time_ns - np.int64(low)), kind="stable")
    order = np.argsort(time_ns, kind="stable")
    return order[np.argsort(key[order], kind="stable")]


def _in_order(key: np.ndarray, time_ns: np.ndarray) -> bool:
    """Rows already in (learner, time) order."""
    step = np.diff(key)
    return bool((step >= 0).all() and (np.diff(time_ns)[step == 0] >= 0).all())


def _learner_sort_key(learner: pd.Series) -> np.ndarray:
    """Sort key for learner ids by their text, computed on the categories only."""
    categories = learner.cat.categories
    rank = np.argsort(np.argsort(categories.astype(str).to_numpy())).astype(
        np.int16 if len(categories) < 2**15 else np.int64)
    return rank[learner.cat.codes.to_numpy()]


def empty_events() -> pd.DataFrame:
    """An EVENTS table with no rows and the right types."""
    return build_events(learner=[], time_ns=np.zeros(0, np.int64), source="", source_row=np.zeros(0, np.int64))


def learner_blocks(events: pd.DataFrame) -> dict[str, tuple[int, int]]:
    """Each learner's [first, last) row range in a sorted EVENTS table.

    Lets callers search one learner's times with ``np.searchsorted`` on a slice, without
    copying or grouping.
    """
    codes = events["learner"].cat.codes.to_numpy()
    if codes.size == 0:
        return {}
    starts = np.concatenate(([0], np.flatnonzero(np.diff(codes)) + 1))
    ends = np.concatenate((starts[1:], [codes.size]))
    categories = events["learner"].cat.categories
    return {str(categories[codes[start]]): (int(start), int(end)) for start, end in zip(starts, ends)}
