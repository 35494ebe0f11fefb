"""Key-to-durable latency: a key press through LiveSession until SQLite has committed the code.

Run: FIELDMARK_PERF=1 /work/venv/bin/python -m pytest tests/perf/test_key_to_disk_perf.py -s
Reference beside it, in the same run and the same folder: a bare sqlite3 INSERT + COMMIT
per row with the store's pragmas (WAL, synchronous=FULL), i.e. the cost of the fsync
alone.  The ratio shows what the session model adds on top of the disk.
"""
from __future__ import annotations

import sqlite3
import statistics
import time
import uuid

import numpy as np
import pytest

from observer_app.coding.live import LiveSession
from observer_app.coding.clock import SystemClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from tests.app.conftest import make_study

CODES = 1200
TARGET_MEDIAN_MS = 15.0


def _percentiles(seconds: list[float]) -> tuple[float, float]:
    values = np.array(seconds) * 1000
    return float(np.median(values)), float(np.percentile(values, 99))


@pytest.mark.perf
def test_key_to_durable_latency(tmp_path):
    study = load_study(make_study(tmp_path / "study", window=600))
    store = Store(study.store_path)
    session = LiveSession.start(study, store, SystemClock(), coder="bench", device="perf")
    keys = "1q2w3e4r5t0t"
    model = []
    for index in range(CODES):
        key = keys[index % len(keys)]
        before = session.state().saved_count
        started = time.perf_counter()
        session.press(key)
        model.append(time.perf_counter() - started)
        assert session.state().saved_count == before + 1
    store.close()
    with sqlite3.connect(study.store_path) as connection:
        assert connection.execute("SELECT count(*) FROM codes").fetchone()[0] == CODES

    reference_path = tmp_path / "reference.sqlite"
    connection = sqlite3.connect(reference_path, isolation_level=None)
    connection.execute("PRAGMA journal_mode = WAL")
    connection.execute("PRAGMA synchronous = FULL")
    connection.execute("CREATE TABLE codes (code_id TEXT PRIMARY KEY, observation_id TEXT, dimension TEXT, "
                       "code TEXT, entered_ns INTEGER, supersedes TEXT)")
    plain = []
    for index in range(CODES):
        started = time.perf_counter()
        connection.execute("BEGIN IMMEDIATE")
        connection.execute("INSERT INTO codes VALUES (?,?,?,?,?,NULL)",
                           (str(uuid.uuid4()), "o", "activity", "on_task", time.time_ns()))
        connection.execute("COMMIT")
        plain.append(time.perf_counter() - started)
    connection.close()

    model_median, model_p99 = _percentiles(model)
    plain_median, plain_p99 = _percentiles(plain)
    print(f"\nkey-to-durable over {CODES} codes (ms): session model median {model_median:.2f}, p99 {model_p99:.2f}; "
          f"plain INSERT+COMMIT median {plain_median:.2f}, p99 {plain_p99:.2f}; "
          f"ratio median {model_median / plain_median:.2f}x, p99 {model_p99 / plain_p99:.2f}x; "
          f"mean {statistics.fmean(model) * 1000:.2f}")
    assert model_median <= TARGET_MEDIAN_MS
