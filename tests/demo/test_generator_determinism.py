"""The generator is a pure function of (seed, size): same seed, same study; other seed, other study."""
from __future__ import annotations

import json

import pandas as pd
import pytest

from demo_sessions.generate import generate_demo
from sync.errors import InputError

SEED = 11  # the seed of the session fixture full_demo


def test_same_seed_gives_identical_output(full_demo, tmp_path, same_output):
    generate_demo(tmp_path, SEED, "full")
    same_output(full_demo, tmp_path)


def test_another_seed_gives_another_study(full_demo, tmp_path):
    generate_demo(tmp_path, SEED + 1, "full")
    assert (tmp_path / "study/logs/centre_north.csv").read_bytes() != (full_demo / "study/logs/centre_north.csv").read_bytes()
    assert (tmp_path / "study/logs/centre_south.jsonl").read_bytes() != (full_demo / "study/logs/centre_south.jsonl").read_bytes()
    planted = [json.loads((root / "truth.json").read_text())["devices"] for root in (full_demo, tmp_path)]
    assert planted[0]["laptop-a"]["offset_s"] != planted[1]["laptop-a"]["offset_s"]
    states = [pd.read_parquet(root / "truth_states.parquet") for root in (full_demo, tmp_path)]
    assert not states[0].equals(states[1])


def test_refuses_to_overwrite_a_previous_demo(full_demo):
    with pytest.raises(InputError, match="already exists"):
        generate_demo(full_demo, SEED, "full")
