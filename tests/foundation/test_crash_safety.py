"""Crash safety, proven: SIGKILL a recording process at random moments, lose nothing acknowledged.

Acknowledged = the store call returned and the id was printed.  SQLite in WAL mode with
synchronous=FULL makes a committed transaction durable (sqlite.org, "Write-Ahead
Logging" and "PRAGMA synchronous": FULL syncs the WAL on every commit).
"""
from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

from observer_app.study.store import Store
from tests.conftest import ROOT

KILLS = 50
WRITERS = 2  # two processes write the same store at once, as the app and an import would


def test_sigkill_at_random_moments_loses_no_acknowledged_code(tmp_path: Path) -> None:
    rng = random.Random(20261202)
    path = tmp_path / "observations.sqlite"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    acknowledged: set[str] = set()
    for _ in range(KILLS // WRITERS):
        processes = [subprocess.Popen([sys.executable, str(Path(__file__).with_name("kill_target.py")), str(path)],
                                      stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env, text=True)
                     for _ in range(WRITERS)]
        for process in processes:
            assert process.stdout is not None
            first = process.stdout.readline()  # the session row is durable: writing has begun
            assert first.startswith("session"), first
        for process in processes:
            time.sleep(rng.uniform(0.0, 0.15))
            process.send_signal(signal.SIGKILL)
        for process in processes:
            rest, _ = process.communicate()
            assert process.returncode == -signal.SIGKILL
            lines = rest.splitlines()
            if lines and not rest.endswith("\n"):
                lines = lines[:-1]  # a half-printed id was never acknowledged
            acknowledged.update(lines)
    assert len(acknowledged) > KILLS, "the writers should have acknowledged many codes"
    with Store(path) as store:
        assert store.integrity_check() == "ok"
        stored = set(store.codes_log()["code_id"])
    missing = acknowledged - stored
    assert not missing, f"{len(missing)} acknowledged codes lost"
    connection = sqlite3.connect(path)
    assert connection.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert connection.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
