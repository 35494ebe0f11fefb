"""Kill a coding process with SIGKILL mid-stream; reopen; nothing acknowledged is lost."""
from __future__ import annotations

import math
import os
import signal
import sqlite3
import subprocess
import sys
from datetime import datetime, timedelta
from pathlib import Path

from observer_app.coding.live import LiveSession, find_interrupted_session
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from tests.app.conftest import make_study

ROOT = Path(__file__).resolve().parents[2]
ROSTER_ORDER = [f"L{n:02d}" for n in range(1, 7)]


def run_until_killed(study_dir: Path, acks_wanted: int) -> tuple[datetime, list[str], datetime]:
    """Start the child, SIGKILL it once it has acknowledged enough codes; return what it said."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    child = subprocess.Popen([sys.executable, str(ROOT / "tests/app/session_child.py"), str(study_dir)],
                             stdout=subprocess.PIPE, text=True, env=env, cwd=ROOT)
    lines = []
    for line in child.stdout:
        lines.append(line.split())
        if len(lines) > acks_wanted:
            break
    os.kill(child.pid, signal.SIGKILL)  # while it is still writing
    rest = child.stdout.read()
    child.wait(timeout=30)
    assert child.returncode == -signal.SIGKILL
    lines += [line.split() for line in rest.splitlines() if line.endswith(tuple("0123456789"))]
    acks = [parts for parts in lines if parts[0] == "ack" and len(parts) == 3]
    return datetime.fromisoformat(lines[0][1]), [parts[1] for parts in acks], datetime.fromisoformat(acks[-1][2])


def test_killed_session_resumes_at_the_right_slot_with_every_acknowledged_code(tmp_path):
    study_dir = make_study(tmp_path / "study")
    shared_start, acknowledged, last_ack_at = run_until_killed(study_dir, acks_wanted=60)
    study = load_study(study_dir)
    with sqlite3.connect(study.store_path) as connection:
        assert connection.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        stored = {row[0] for row in connection.execute("SELECT code_id FROM codes")}
    assert set(acknowledged) <= stored  # every acknowledged code survived the kill
    assert len(acknowledged) >= 60

    reopened_at = last_ack_at + timedelta(seconds=100)
    expected_slot = math.floor((reopened_at - shared_start).total_seconds() / study.window_seconds)
    # Same boot: the child's monotonic clock ran in step with its wall clock (7000 s at its start).
    # After a reboot the monotonic clock restarts near zero and only the wall clock can tell.
    child_monotonic = 7000.0 + (reopened_at - (shared_start - timedelta(seconds=5))).total_seconds()
    for monotonic in (12.0, child_monotonic):
        clock = FakeClock(monotonic=monotonic, wall=reopened_at)
        with Store(study.store_path) as store:
            interrupted = find_interrupted_session(study, store, "laptop-1")
            assert interrupted is not None and interrupted.codes_saved >= len(acknowledged)
            session = LiveSession.reopen(study, store, clock, interrupted.session_id)
            state = session.state()
            assert state.slot == expected_slot
            assert state.learner == ROSTER_ORDER[expected_slot % len(ROSTER_ORDER)]  # fixed order, nobody absent
            observations = store.observations(study.scheme.dimension_names)
            slots = sorted(int(s) for s in observations["slot"])
            assert slots == list(range(slots[0], expected_slot))  # windows missed while down: no-code rows
    with Store(study.store_path) as store:
        session = LiveSession.reopen(study, store, clock, interrupted.session_id)
        assert session.press("4")
        assert session.state().coded == {"activity": "rapid_guessing"}
        assert session.state().saved_count == len(stored) + 1
