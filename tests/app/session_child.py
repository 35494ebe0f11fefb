"""A coder's device that keeps coding until it is killed (used by the kill-and-resume test).

argv: STUDY_DIR.  Prints "start <paired start ISO>" then, after every code that
LiveSession reports durable, "ack <code_id> <wall clock ISO>" and flushes.
"""
from __future__ import annotations

import sys
from datetime import timedelta

from observer_app.coding.live import LiveSession
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study

study = load_study(sys.argv[1])
store = Store(study.store_path)
clock = FakeClock(monotonic=7000.0)
shared = clock.now_utc() + timedelta(seconds=5)
session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=shared)
print("start", shared.isoformat(), flush=True)
keys = "1q2w3e4r0t"
step = 0
while True:
    clock.advance(3.0)
    session.tick()
    before = session.state().saved_count
    session.press(keys[step % len(keys)])
    state = session.state()
    if state.saved_count > before:
        print("ack", state.last_code_id, clock.now_utc().isoformat(), flush=True)
    step += 1
