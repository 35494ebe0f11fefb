"""The small demo study committed under demo_sessions/copy/ is exactly what the generator makes."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from observer_app.study import load_study

ROOT = Path(__file__).resolve().parents[2]
COPY = ROOT / "demo_sessions" / "copy"


def test_regenerating_with_the_copys_seed_reproduces_it(tmp_path, same_output):
    recorded = json.loads((COPY / "truth.json").read_text())
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    result = subprocess.run(
        [sys.executable, "-m", "demo_sessions", "--out", str(tmp_path), "--seed", str(recorded["seed"]),
         "--size", recorded["size"]], capture_output=True, text=True, env=env, timeout=120)
    assert result.returncode == 0, result.stderr
    same_output(COPY, tmp_path)


def test_the_copy_is_a_valid_small_study():
    study = load_study(COPY / "study")
    assert study.warnings == ()
    assert 6 <= len(study.roster) <= 24
    assert sum(p.stat().st_size for p in COPY.rglob("*") if p.is_file()) < 3_000_000
