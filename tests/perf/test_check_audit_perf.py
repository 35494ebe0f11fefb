"""Benchmark: `check --by site --transfer site` with each model against the same nested search written
directly with scikit-learn (GridSearchCV with a grouped inner splitter inside cross_val_predict,
metadata routing on) on the same outer folds.  Target: the whole audit within 1.5x.

50k windows x 30 features, 500 learners at two sites, three codes; each model's grid
(at most 8 settings), 3 inner folds, 5 outer folds.  Both arms run under the same
one-thread BLAS/OpenMP limit.  FIELDMARK_AUDIT_ROWS / FIELDMARK_AUDIT_LEARNERS shrink it.

Run: FIELDMARK_PERF=1 pytest tests/perf/test_check_audit_perf.py -s
"""
from __future__ import annotations

import os
import time
import warnings

import numpy as np
import pandas as pd
from sklearn import config_context
from sklearn.model_selection import GridSearchCV, GroupKFold, cross_val_predict
from threadpoolctl import threadpool_limits

from export.detector_check import CheckSettings, check_dimension
from export.detector_models import MODELS, candidate
from export.nested_search import INNER_FOLDS, inner_scorer
from export.out_of_fold import grouped_folds

ROWS = int(os.environ.get("FIELDMARK_AUDIT_ROWS", 50_000))
LEARNERS = int(os.environ.get("FIELDMARK_AUDIT_LEARNERS", 500))
FEATURES = 30


def windows(seed: int = 0) -> tuple[pd.DataFrame, pd.Series, pd.Series, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    learner = rng.integers(0, LEARNERS, ROWS)
    habit = rng.normal(size=(LEARNERS, FEATURES))[learner] * 0.5
    codes = np.array(["bored", "confused", "focused"])
    truth = rng.choice(3, ROWS, p=[0.25, 0.15, 0.6])
    signal = np.zeros((ROWS, FEATURES))
    signal[:, :6] = np.eye(3)[truth].repeat(2, axis=1) * 0.8
    features = pd.DataFrame(signal + habit + rng.normal(size=(ROWS, FEATURES)),
                            columns=[f"feature_{n:02d}" for n in range(FEATURES)])
    groups = pd.Series([f"p-{n:03d}" for n in learner])
    site = pd.DataFrame({"site": np.where(learner < LEARNERS // 2, "north", "south")})
    return features, pd.Series(codes[truth]), groups, site


def direct_nested_search(model: str, features, labels, groups, folds) -> np.ndarray:
    """The obvious alternative: scikit-learn's own nested search, nothing else."""
    codes = np.unique(labels.to_numpy())
    with config_context(enable_metadata_routing=True), threadpool_limits(limits=1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        chosen = candidate(model, 0)
        search = GridSearchCV(chosen.pipeline, chosen.grid, cv=GroupKFold(INNER_FOLDS), scoring=inner_scorer(codes))
        return cross_val_predict(search, features, labels.to_numpy(), cv=folds, params={"groups": groups.to_numpy()},
                                 method="predict_proba")


def test_audit_against_the_bare_nested_search():
    features, labels, groups, site = windows()
    folds = grouped_folds(labels, groups, 5, 0)
    totals = {"audit": 0.0, "direct": 0.0}
    print(f"\n{ROWS} windows x {FEATURES} features, {LEARNERS} learners, 5 outer x {INNER_FOLDS} inner folds")
    for model in MODELS:
        began = time.perf_counter()
        result = check_dimension(features, labels, groups, "affect",
                                 CheckSettings(model=model, by=("site",), transfer="site"), context=site)
        audit = time.perf_counter() - began
        began = time.perf_counter()
        direct_nested_search(model, features, labels, groups, folds)
        direct = time.perf_counter() - began
        totals["audit"] += audit
        totals["direct"] += direct
        assert result.model.auc > 0.6 and result.transfer["leave_one_group_out"]
        print(f"{model:<9} audit {audit:8.1f} s   direct nested search {direct:8.1f} s   ratio {audit / direct:.2f}"
              f"   ({result.settings_tried} settings)")
    ratio = totals["audit"] / totals["direct"]
    print(f"all       audit {totals['audit']:8.1f} s   direct nested search {totals['direct']:8.1f} s   ratio {ratio:.2f}")
    assert ratio <= 1.5
