"""The small demo study committed under demo_sessions/copy/ is exactly what the generator makes."""
from __future__ import annotations

import json

from demo_sessions import committed_copy
from demo_sessions.__main__ import main
from observer_app.study.folder import load_study

COPY = committed_copy().parent


def test_regenerating_with_the_copys_seed_reproduces_it(tmp_path, same_output, capsys):
    recorded = json.loads((COPY / "truth.json").read_text())
    # `python -m demo_sessions`'s own main, in this process (a subprocess costs seconds of imports)
    assert main(["--out", str(tmp_path), "--seed", str(recorded["seed"]), "--size", recorded["size"]]) == 0
    assert "coded windows" in capsys.readouterr().out
    same_output(COPY, tmp_path)


def test_the_copy_is_a_valid_small_study():
    study = load_study(COPY / "study")
    assert study.warnings == ()
    assert 6 <= len(study.roster) <= 24
    assert sum(p.stat().st_size for p in COPY.rglob("*") if p.is_file()) < 3_000_000
