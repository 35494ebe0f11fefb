"""Relative clock offsets from paired signal marks (sync/clock_pairs.py)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sync.clock_pairs import MIN_DRIFT_SPAN_S, partner_time_ns, relative_offsets

T0 = pd.Timestamp("2026-03-09T08:00:00Z").value


def _marks(starts_s, offset_s, drift_ppm, reaction_s, kinds=("signal start", "signal end"), run_s=1800.0):
    """Two devices pressing on the same countdowns; b reads a's instant t as t + offset + drift * t."""
    rows = []
    for number, start in enumerate(starts_s):
        for kind, moment in zip(kinds, (start, start + run_s)):
            a = T0 + int(moment * 1e9)
            true_b = moment + reaction_s[len(rows) // 2 % len(reaction_s)]
            b = T0 + int((true_b + offset_s + drift_ppm * 1e-6 * true_b) * 1e9)
            rows += [{"pairing_id": f"RUN{number}", "device": "laptop-a", "kind": kind, "marked_ns": a},
                     {"pairing_id": f"RUN{number}", "device": "laptop-b", "kind": kind, "marked_ns": b}]
    return pd.DataFrame(rows)


def test_one_run_gives_the_offset_and_assumes_no_drift():
    found = relative_offsets(_marks([0.0], 28.0, 50.0, (0.4, -0.3))).iloc[0]
    assert (found["device_a"], found["device_b"], found["marks_used"]) == ("laptop-a", "laptop-b", 2)
    assert found["drift_ppm"] == 0.0  # 30 minutes cannot tell 50 ppm from reaction times
    assert abs(found["offset_s"] - (28.0 + 50e-6 * 900)) < 0.4
    floor = 0.15 / np.sqrt(2)  # REACTION_DIFFERENCE_SD_S over two marks
    assert found["standard_error_s"] > floor  # the two signals disagree by 0.7 s: the error shows it
    steady = relative_offsets(_marks([0.0], 28.0, 0.0, (0.05, 0.0))).iloc[0]
    assert steady["standard_error_s"] == pytest.approx(floor)  # two signals cannot show their own scatter


def test_a_day_of_runs_gives_the_drift_too():
    starts = [0.0, 2 * 3600.0, 4 * 3600.0, 7 * 3600.0]
    assert starts[-1] + 1800 - starts[0] >= MIN_DRIFT_SPAN_S
    reactions = (0.1, -0.2, 0.3, 0.0, -0.1, 0.2, -0.3, 0.15)
    found = relative_offsets(_marks(starts, 28.0, 50.0, reactions)).iloc[0]
    assert found["marks_used"] == 8 and found["pairing_ids"] == "RUN0,RUN1,RUN2,RUN3"
    assert abs(found["drift_ppm"] - 50.0) < 30.0
    at_reference = (found["reference_ns"] - T0) / 1e9
    assert abs(found["offset_s"] - (28.0 + 50e-6 * at_reference)) < 0.3


def test_marks_without_a_partner_or_pairing_id_are_left_out():
    marks = _marks([0.0], 5.0, 0.0, (0.0,))
    lonely = pd.DataFrame([{"pairing_id": "RUN9", "device": "laptop-c", "kind": "signal start", "marked_ns": T0},
                           {"pairing_id": None, "device": "laptop-a", "kind": "signal start", "marked_ns": T0}])
    found = relative_offsets(pd.concat([marks, lonely], ignore_index=True))
    assert len(found) == 1 and found.iloc[0]["marks_used"] == 2
    assert relative_offsets(marks.iloc[0:0]).empty


def test_partner_time_reads_either_way_round():
    row = {"device_a": "laptop-a", "device_b": "laptop-b", "offset_s": 28.0, "drift_ppm": 50.0, "reference_ns": T0}
    instants = np.array([T0, T0 + 3_600_000_000_000], dtype=np.int64)
    on_b = partner_time_ns(row, "laptop-a", instants)
    assert (on_b - instants).tolist() == [28_000_000_000, 28_000_000_000 + 180_000_000]
    assert np.abs(partner_time_ns(row, "laptop-b", on_b) - instants).max() <= 1
    with pytest.raises(ValueError):
        partner_time_ns(row, "laptop-c", instants)
