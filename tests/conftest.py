"""Shared fixtures: offscreen Qt, and running the real command line in a subprocess."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

ROOT = Path(__file__).resolve().parents[1]

# Benchmarks in tests/perf/ run on demand only: FIELDMARK_PERF=1 pytest tests/perf -s
collect_ignore_glob = [] if os.environ.get("FIELDMARK_PERF") else ["perf/*"]


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess:
    """Run ``fieldmark ARGS`` exactly as a user would (same entry point as the console script)."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run(
        [sys.executable, "-m", "observer_app", *map(str, args)],
        capture_output=True, text=True, cwd=cwd, env=env, timeout=timeout,
    )


def call_cli(*args: str) -> subprocess.CompletedProcess:
    """Run ``fieldmark ARGS`` in this process (same ``main`` as the console script, ~50x faster).

    An unexpected exception propagates, so a traceback still fails the test.
    """
    import contextlib
    import io

    from observer_app.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main([str(a) for a in args])
        except SystemExit as stop:
            code = stop.code if isinstance(stop.code, int) else 2
    return subprocess.CompletedProcess(list(args), code, out.getvalue(), err.getvalue())


@pytest.fixture
def cli():
    """The ``run_cli`` function as a fixture."""
    return run_cli


def assert_user_error(result: subprocess.CompletedProcess, *needles: str) -> None:
    """Exit 2, exactly one stderr line, no traceback, and the line names what it should."""
    assert result.returncode == 2, (result.returncode, result.stdout, result.stderr)
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stderr
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])
