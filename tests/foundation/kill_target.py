"""A process that records codes as fast as it can and prints each id once it is durable.

Run by test_crash_safety.py, which SIGKILLs it at a random moment.  A printed id is an
acknowledged code: the store call returned, so the screen would have said "saved".
"""
from __future__ import annotations

import sys
from datetime import datetime, timedelta, timezone

from observer_app.study.store import Store

store = Store(sys.argv[1])
start = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)
session = store.start_session(coder="ana", device="laptop-a", mode="live", started_at=start, monotonic_start=0.0,
                              window_seconds=20, order="fixed", seed=0, scheme_hash="h")
print(f"session {session}", flush=True)
n = 0
while True:
    window_start = start + timedelta(seconds=20 * n)
    code_id = store.record_code(
        observation_id=f"{session}:{n}", session_id=session, learner=f"L{n % 24 + 1:02d}",
        window_start=window_start, window_end=window_start + timedelta(seconds=20), dimension="activity",
        code="on_task", entered_at=window_start + timedelta(seconds=3), scheme_hash="h", slot=n)
    print(code_id, flush=True)
    n += 1
