"""EVENTS come out sorted by learner (as text), then time, ties in input order, however the
rows arrive: checked against pandas' own stable multi-key sort (pandas.DataFrame.sort_values,
a reference library), including the shape a partitioned dataset gives (each file sorted by
learner then time, learners recurring in every file) and spans too wide for one sort key."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sync.event_table import build_events, combine_events

SECOND = 1_000_000_000


def _part(rng: np.random.Generator, names: list[str], start_ns: int, span_ns: int, rows: int,
          source: str, arrival: str) -> pd.DataFrame:
    codes = rng.integers(0, len(names), rows)
    time_ns = start_ns + rng.integers(0, span_ns, rows)
    time_ns[rows // 2:rows // 2 + 20] = time_ns[rows // 2]  # ties within the part
    if arrival != "shuffled":
        by_learner = np.array(names, dtype=object)[codes].astype(str)
        order = np.lexsort((time_ns, by_learner)) if arrival == "by learner" else np.argsort(time_ns, kind="stable")
        codes, time_ns = codes[order], time_ns[order]
    return build_events(learner=pd.Categorical.from_codes(codes, names), time_ns=time_ns,
                        source=source, source_row=np.arange(1, rows + 1))


def _reference(parts: list[pd.DataFrame]) -> pd.DataFrame:
    frame = pd.concat([part.assign(learner=part["learner"].astype(str), source=part["source"].astype(str))
                       for part in parts], ignore_index=True)
    return frame.sort_values(["learner", "time_ns"], kind="stable").reset_index(drop=True)


@pytest.mark.parametrize("arrival", ["by learner", "shuffled", "in time order"])
@pytest.mark.parametrize("span_ns", [10 * 86_400 * SECOND,  # ten days: one int64 key holds learner and time
                                     (2099 - 1971) * 365 * 86_400 * SECOND])  # a century: two passes
def test_combined_events_follow_pandas_stable_sort(arrival: str, span_ns: int) -> None:
    rng = np.random.default_rng(7)
    names = ["n-2", "n-10", "n-1", "m-30"]  # category order is not text order
    start = 31_536_000 * SECOND  # 1971
    if arrival == "in time order":  # one log written as time went: rows in time order throughout
        parts = [_part(rng, names, start, span_ns, 18_000, "log.csv", arrival)]
    else:  # a dataset's files, each sorted (or not) on its own, learners in every file
        parts = [_part(rng, names, start + day * 86_400 * SECOND, span_ns, 3_000, f"day-{day}.parquet", arrival)
                 for day in range(6)]
        parts.append(parts[0].copy())  # the same rows again: every tie must keep input order
    combined = combine_events(parts)
    reference = _reference(parts)
    assert combined["learner"].astype(str).tolist() == reference["learner"].tolist()
    assert combined["time_ns"].tolist() == reference["time_ns"].tolist()
    assert list(zip(combined["source"].astype(str), combined["source_row"])) == \
        list(zip(reference["source"], reference["source_row"]))
