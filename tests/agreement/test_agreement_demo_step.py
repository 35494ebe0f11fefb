"""The demo pipeline's agree step reports what scikit-learn computes on the demo's paired windows."""
from __future__ import annotations

import pytest
from sklearn.metrics import cohen_kappa_score

from demo_sessions.pipeline import run_demo
from observer_app.study.store import Store
from observer_app.study.folder import load_study


def test_demo_agree_step_matches_scikit_learn(tmp_path):
    summary = run_demo(tmp_path / "demo", seed=3, size="small", progress=False)
    assert "agree" in [step["name"] for step in summary["steps"]]
    study = load_study(summary["study"])
    with Store(study.store_path) as store:
        paired = store.observations(study.scheme.dimension_names)
    paired = paired[paired["paired_start"].notna()]
    for dimension in study.scheme.dimensions:
        # Paired-run windows share (run, slot, learner), the run being its pairing id (each laptop's
        # paired_start is its own clock's reading of the start signal); could-not-observe left out.
        wide = paired.pivot_table(index=["pairing_id", "slot", "learner"], columns="coder",
                                  values=dimension.name, aggfunc="first")
        wide = wide.dropna()
        wide = wide[(wide != dimension.could_not_observe).all(axis=1)]
        first, second = sorted(wide.columns)
        # Reference: sklearn.metrics.cohen_kappa_score on the same pairs.
        expected = cohen_kappa_score(wide[first], wide[second])
        kappa = summary["dimensions"][dimension.name]["kappa"]
        assert kappa["value"] == pytest.approx(expected, abs=1e-12)
        assert kappa["low"] <= kappa["value"] <= kappa["high"]
    assert "Agreement between the coders" in (tmp_path / "demo" / "report.html").read_text()
