"""Views: rolling kappa, per pair, per session; and planning the number of pairs."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import cohens_kappa

from agreement.dimensions import Dimension
from agreement.planning import joint_table, pairs_needed
from agreement.breakdowns import by_pair, by_session, rolling_kappa
from tests.conftest import call_cli, run_cli

CODES = ("on_task", "off_task", "away")
ACTIVITY = Dimension("activity", "nominal", CODES)


def drifting_units(count: int = 120, seed: int = 3) -> pd.DataFrame:
    """Two coders who agree at first and drift apart in the second half."""
    generator = np.random.default_rng(seed)
    start = pd.Timestamp("2026-03-02 08:00", tz="UTC")
    rows = []
    for index in range(count):
        truth = generator.integers(0, 3)
        second = truth if index < count // 2 or generator.random() < 0.4 else generator.integers(0, 3)
        time = start + pd.Timedelta(seconds=20 * index)
        for coder, code in (("ann", truth), ("ben", second)):
            rows.append({"unit": f"u{index:03d}", "coder": coder, "learner": f"L{index % 10}",
                         "session_id": "morning" if index < count // 2 else "afternoon", "time": time,
                         "activity": CODES[code]})
    return pd.DataFrame(rows).assign(activity=lambda frame: frame["activity"].astype("string"))


def test_rolling_kappa_equals_scikit_learn_on_each_window():
    units = drifting_units().sample(frac=1, random_state=1)  # row order must not matter: time does
    rolling = rolling_kappa(units, ACTIVITY, window=30)
    wide = units.pivot(index="unit", columns="coder", values="activity").sort_index()
    assert len(rolling) == 120 - 30 + 1
    for row in rolling.iloc[[0, 40, 90]].itertuples():
        window = wide.iloc[row.position - 30: row.position]
        # Reference: sklearn cohen_kappa_score on the same 30 consecutive units.
        assert row.kappa == pytest.approx(cohen_kappa_score(window["ann"], window["ben"]), abs=1e-12)
    assert rolling["kappa"].iloc[0] == 1.0 and rolling["kappa"].iloc[-1] < 0.8  # the drift shows


def test_by_session_and_by_pair():
    units = drifting_units()
    sessions = by_session(units, [ACTIVITY], resamples=50, seed=1)
    assert set(sessions) == {"morning", "afternoon"}
    assert sessions["morning"].dimensions["activity"].figures["cohen_kappa"].value == 1.0
    afternoon = units[units["session_id"] == "afternoon"].pivot(index="unit", columns="coder", values="activity")
    assert sessions["afternoon"].dimensions["activity"].figures["cohen_kappa"].value == pytest.approx(
        cohen_kappa_score(afternoon["ann"], afternoon["ben"]), abs=1e-12)
    third = units[units["coder"] == "ben"].assign(coder="cat")
    pairs = by_pair(pd.concat([units, third]), [ACTIVITY], resamples=20, seed=1)
    assert set(pairs) == {("ann", "ben"), ("ann", "cat"), ("ben", "cat")}
    assert pairs[("ben", "cat")].dimensions["activity"].figures["cohen_kappa"].value == 1.0


def test_session_view_via_cli(tmp_path):
    csv = tmp_path / "drift.csv"
    drifting_units().drop(columns=["time"]).to_csv(csv, index=False)
    result = call_cli("agree", csv, "--json", "--by", "session", "--resamples", "50")
    assert result.returncode == 0, result.stderr
    by = {entry["session"]: entry["dimensions"]["activity"] for entry in json.loads(result.stdout)["by"]}
    assert by["morning"]["cohen_kappa"]["value"] == 1.0
    assert by["afternoon"]["cohen_kappa"]["value"] < 1.0


def test_planned_pairs_agree_with_asymptotic_variance():
    # Reference: the large-sample variance of kappa of Fleiss, Cohen & Everitt (1969),
    # as computed by statsmodels.stats.inter_rater.cohens_kappa (std_kappa), on the
    # expected table of the planned number of pairs: 2 * 1.96 * SE should match the width.
    shares = [0.6, 0.3, 0.1]
    plan = pairs_needed(0.7, shares, width=0.2)
    expected = cohens_kappa(joint_table(0.7, np.array(shares)) * plan.pairs)
    assert expected.kappa == pytest.approx(0.7)
    assert 2 * 1.959964 * expected.std_kappa == pytest.approx(0.2, rel=0.06)
    assert plan.achieved_width <= 0.2
    # Quadrupling the pairs halves the width (variance ~ 1/n): a narrower ask needs more.
    tighter = pairs_needed(0.7, shares, width=0.1)
    assert tighter.pairs == pytest.approx(4 * plan.pairs, rel=0.1)


def test_plan_command():
    result = run_cli("plan", "--kappa", "0.7", "--width", "0.2", "--prevalence", "0.6,0.3,0.1", "--json")
    assert result.returncode == 0, result.stderr
    document = json.loads(result.stdout)
    assert document["pairs"] == pairs_needed(0.7, [0.6, 0.3, 0.1], 0.2).pairs
