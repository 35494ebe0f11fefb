"""Stronger models, nested grouped tuning and calibration of the detector check."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.calibration import calibration_curve
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import brier_score_loss, cohen_kappa_score, roc_auc_score
from sklearn.model_selection import GroupKFold, KFold, cross_val_predict

import export.nested_search as nested_search
from export.calibration import brier_score, reliability_curve
from export.detector_check import CheckSettings, check_dimension
from export.detector_models import GRIDS, MODELS
from export.nested_search import tuned_out_of_fold
from export.out_of_fold import grouped_folds, score
from observer_app.commands.check import MODELS as CLI_MODELS


def learner_habits(learners: int = 24, per_learner: int = 15, seed: int = 0, signal: float = 1.0):
    """Each learner has a habitual rate of being bored (their own base rate) and a weak
    window-level signal; ``learner_code`` says only who the learner is."""
    rng = np.random.default_rng(seed)
    names = np.array([f"p-{number:03d}" for number in range(learners)])
    groups = pd.Series(np.repeat(names, per_learner))
    habit = np.repeat(rng.uniform(0.02, 0.98, learners), per_learner)
    labels = pd.Series(np.where(rng.random(len(groups)) < habit, "bored", "focused"))
    signal_feature = np.where(labels == "bored", signal, 0.0) + rng.normal(size=len(groups))
    features = pd.DataFrame({"pace": signal_feature, "noise": rng.normal(size=len(groups))})
    learner_code = np.repeat(rng.permutation(learners).astype(float), per_learner)
    return features, labels, groups, learner_code


@pytest.mark.parametrize("model", ["forest", "boosting"])
def test_a_feature_naming_the_learner_does_not_raise_the_out_of_fold_score(model) -> None:
    features, labels, groups, learner_code = learner_habits(learners=16, per_learner=12, signal=0.3)
    folds = grouped_folds(labels, groups, 4, seed=0)
    plain = tuned_out_of_fold(model, features, labels, groups, folds)
    with_identity = tuned_out_of_fold(model, features.assign(learner_code=learner_code), labels, groups, folds)
    plain_auc = score(labels, plain.codes, plain.predicted, plain.probability).auc
    identity_auc = score(labels, with_identity.codes, with_identity.predicted, with_identity.probability).auc
    assert identity_auc <= plain_auc + 0.03
    # the same feature with row-wise folds (the leak) does raise it: the test can fail
    leaky = cross_val_predict(RandomForestClassifier(100, min_samples_leaf=2, random_state=0),
                              features.assign(learner_code=learner_code), labels,
                              cv=KFold(4, shuffle=True, random_state=0), method="predict_proba")
    assert roc_auc_score(labels == "focused", leaky[:, 1]) > plain_auc + 0.05


def test_inner_folds_are_grouped_by_learner(monkeypatch) -> None:
    seen = []

    class Recording(GroupKFold):
        def split(self, X, y=None, groups=None):
            assert groups is not None, "groups did not reach the inner splitter"
            for train, test in super().split(X, y, groups):
                seen.append(set(np.asarray(groups)[train]) & set(np.asarray(groups)[test]))
                yield train, test

    monkeypatch.setattr(nested_search, "GroupKFold", Recording)
    features, labels, groups, _ = learner_habits(learners=12)
    tuned_out_of_fold("logistic", features, labels, groups, grouped_folds(labels, groups, 3))
    assert len(seen) == 3 * 3 and all(not shared for shared in seen)      # 3 outer x 3 inner folds, no learner shared


@pytest.mark.parametrize("model", MODELS)
def test_every_model_finds_signal_and_reports_its_tuning(model) -> None:
    features, labels, groups, _ = learner_habits(learners=15, signal=3.0, seed=1)
    result = check_dimension(features, labels, groups, "affect", CheckSettings(model=model, folds=3))
    assert result.model.kappa > 0.6 and result.model.auc > 0.9
    assert result.model_name == model and result.settings_tried <= 8
    grid = GRIDS[model]
    assert len(result.chosen_settings) == 3
    assert all(set(chosen) == set(grid) and all(chosen[key] in grid[key] for key in grid)
               for chosen in result.chosen_settings)
    assert result.auc_definition.startswith("ROC AUC of the probability of code focused")
    assert 0 <= result.calibration["brier"] < 0.25                      # better than always 0.5


def test_the_command_offers_exactly_the_library_models() -> None:
    assert CLI_MODELS == MODELS


def test_multi_code_auc_is_scikit_learns_one_vs_rest_macro() -> None:
    rng = np.random.default_rng(3)
    truth = rng.choice(["bored", "confused", "focused"], 300)
    probability = rng.dirichlet([1, 1, 1], 300) + (truth[:, None] == np.array(["bored", "confused", "focused"])) * 0.5
    probability /= probability.sum(axis=1, keepdims=True)
    codes = np.array(["bored", "confused", "focused"])
    predicted = codes[probability.argmax(axis=1)]
    figures = score(truth, codes, predicted, probability)
    # reference: scikit-learn's roc_auc_score, multi_class="ovr", average="macro"
    assert figures.auc == pytest.approx(roc_auc_score(truth, probability, multi_class="ovr", average="macro"))
    assert figures.kappa == pytest.approx(cohen_kappa_score(truth, predicted))


def test_brier_score_and_reliability_curve_match_scikit_learn() -> None:
    rng = np.random.default_rng(4)
    codes = np.array(["off_task", "on_task"])
    p_on = rng.random(500)
    truth = np.where(rng.random(500) < p_on, "on_task", "off_task")
    probability = np.column_stack([1 - p_on, p_on])
    # reference: scikit-learn's brier_score_loss and calibration_curve(strategy="uniform")
    assert brier_score(truth, codes, probability) == pytest.approx(brier_score_loss(truth == "on_task", p_on))
    observed, predicted = calibration_curve(truth == "on_task", p_on, n_bins=10)
    curve = reliability_curve(truth, codes, probability)
    assert [b.observed for b in curve] == pytest.approx(observed)
    assert [b.mean_predicted for b in curve] == pytest.approx(predicted)
    assert sum(b.windows for b in curve) == 500
    three = np.array(["bored", "confused", "focused"])
    labels = rng.choice(three, 200)
    spread = rng.dirichlet([1, 1, 1], 200)
    assert brier_score(labels, three, spread) == pytest.approx(brier_score_loss(labels, spread, labels=list(three)))
