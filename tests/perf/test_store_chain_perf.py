"""What the hash chain costs: a durable code with the chain vs the same store without it,
and `fieldmark verify` over many rows.  Run: FIELDMARK_PERF=1 pytest tests/perf/test_store_chain_perf.py -s
"""
from __future__ import annotations

import sqlite3
import time
from datetime import datetime, timedelta, timezone
from pathlib import Path

from observer_app.study.row_chain import chained_tables, verify_chain
from observer_app.study.foreign_store import reference_triggers
from observer_app.study.store import SCHEMA_VERSION, Store

T0 = datetime(2026, 3, 10, 8, tzinfo=timezone.utc)
CODES = 300
BULK = 50_000


def _code_seconds(store: Store, session: str, prefix: str) -> float:
    started = time.perf_counter()
    for number in range(CODES):
        start = T0 + timedelta(seconds=20 * number)
        store.record_code(observation_id=f"{prefix}{number}", session_id=session, learner="L01", window_start=start,
                          window_end=start + timedelta(seconds=20), dimension="activity", code="on_task",
                          entered_at=start, scheme_hash="h")
    return (time.perf_counter() - started) / CODES


def test_chain_cost_per_durable_code_and_verify_speed(tmp_path: Path) -> None:
    chained = Store(tmp_path / "chained.sqlite")
    session = chained.start_session(coder="ana", device="d", mode="live", started_at=T0, monotonic_start=0.0,
                                    window_seconds=20, order="fixed", seed=1, scheme_hash="h")
    with_chain = _code_seconds(chained, session, "c")
    chained.close()

    plain_path = tmp_path / "plain.sqlite"
    plain = Store(plain_path)
    session = plain.start_session(coder="ana", device="d", mode="live", started_at=T0, monotonic_start=0.0,
                                  window_seconds=20, order="fixed", seed=1, scheme_hash="h")
    for table in chained_tables(plain._connection):  # the same store without the chain: the alternative
        plain._connection.execute(f'DROP TRIGGER "{table}_chain"')
    without_chain = _code_seconds(plain, session, "p")
    plain._connection.close()

    bulk = Store(tmp_path / "bulk.sqlite")
    session = bulk.start_session(coder="ana", device="d", mode="live", started_at=T0, monotonic_start=0.0,
                                 window_seconds=20, order="fixed", seed=1, scheme_hash="h")
    with bulk._transaction() as cursor:
        cursor.executemany("INSERT INTO observations VALUES (?,?,?,?,?,?,?,?,0,?)",
                           [(f"o{n}", session, "L01", None, "", n, n + 20, n, "h") for n in range(BULK)])
    bulk.close()
    connection = sqlite3.connect(tmp_path / "bulk.sqlite")
    started = time.perf_counter()
    rows, first_break = verify_chain(connection, reference_triggers(SCHEMA_VERSION))
    verify_seconds = time.perf_counter() - started
    connection.close()
    print(f"\nper durable code: with chain {with_chain * 1e3:.2f} ms, without {without_chain * 1e3:.2f} ms, "
          f"ratio {with_chain / without_chain:.2f}; verify: {rows} rows in {verify_seconds:.2f} s "
          f"({rows / verify_seconds:,.0f} rows/s)")
    assert first_break is None and rows == BULK + 1
    assert with_chain < 3 * without_chain + 0.005  # the fsync dominates; the chain adds little
