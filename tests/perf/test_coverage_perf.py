"""Benchmark: the coverage check (sync/coverage.py) on 5M events x 50k windows against a
DuckDB range join computing the same per-learner counts, in the same run.

    FIELDMARK_PERF=1 /work/venv/bin/python -m pytest tests/perf/test_coverage_perf.py -s

The check runs on every export and align, so it must cost little beside reading the log:
target ours <= duckdb.  Both answers are compared, so the figure is like for like.
"""
from __future__ import annotations

import time

import duckdb
import numpy as np
import pandas as pd

from sync.coverage import learner_coverage

LEARNERS, EVENTS_PER_LEARNER, WINDOW_COUNT = 1_000, 5_000, 50_000
SECOND = 1_000_000_000


def inputs() -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(11)
    names = np.array([f"n-{number:05d}" for number in range(LEARNERS)])
    gaps = (rng.exponential(7.0, (LEARNERS, EVENTS_PER_LEARNER)) * SECOND).astype(np.int64) + 1
    time_ns = (np.cumsum(gaps, axis=1) + 1_780_000_000 * SECOND).ravel()
    events = pd.DataFrame({"learner": pd.Categorical(np.repeat(names, EVENTS_PER_LEARNER)), "time_ns": time_ns})
    which = rng.integers(0, LEARNERS, WINDOW_COUNT)
    start = 1_780_000_000 * SECOND + rng.integers(0, 30_000, WINDOW_COUNT) * SECOND
    windows = pd.DataFrame({"learner": [f"L{n:05d}" for n in which], "log_id": names[which],
                            "start_ns": start, "end_ns": start + 20 * SECOND})
    return events, windows


def test_coverage_is_no_slower_than_a_duckdb_range_join() -> None:
    events, windows = inputs()
    began = time.perf_counter()
    ours = learner_coverage(events, windows).learners
    ours_s = time.perf_counter() - began
    connection = duckdb.connect()
    connection.register("events", events.assign(learner=events["learner"].astype(str)))
    connection.register("windows", windows.reset_index())
    began = time.perf_counter()
    theirs = connection.execute(
        "SELECT w.learner, sum(coalesce(n, 0))::BIGINT AS events_in_windows FROM windows w LEFT JOIN ("
        "  SELECT w2.index, count(*) AS n FROM windows w2 JOIN events e"
        "  ON e.learner = w2.log_id AND e.time_ns >= w2.start_ns AND e.time_ns < w2.end_ns GROUP BY w2.index"
        ") c ON c.index = w.index GROUP BY w.learner ORDER BY w.learner").df()
    duckdb_s = time.perf_counter() - began
    assert ours["events_in_windows"].tolist() == theirs["events_in_windows"].tolist()
    print(f"\ncoverage of {len(windows)} windows over {len(events)} events: ours {ours_s:.2f} s, "
          f"DuckDB range join {duckdb_s:.2f} s, ratio ours/duckdb {ours_s / duckdb_s:.2f}")
    assert ours_s <= duckdb_s
