"""The detector check: folds of whole learners, kappa and AUC against baselines, `fieldmark check`."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score
from sklearn.model_selection import KFold, cross_val_predict

from export.detector_check import DEFAULT_FOLDS, check_dimension, grouped_folds
from observer_app.cli import main
from tests.conftest import assert_user_error, run_cli

from export_study_data import export_file


def learner_fingerprint_data(learners: int = 30, per_learner: int = 20, seed: int = 0):
    """Each learner has one fixed random label and a feature that only says who they are:
    nothing generalises to a new learner, everything is memorised about a known one."""
    rng = np.random.default_rng(seed)
    groups = pd.Series(np.repeat([f"p-{number:03d}" for number in range(learners)], per_learner))
    label_of = dict(zip(groups.unique(), rng.choice(["bored", "focused"], learners)))
    labels = groups.map(label_of)
    identity = np.repeat(rng.normal(size=(learners, 3)) * 10, per_learner, axis=0)
    features = pd.DataFrame(identity + rng.normal(scale=0.1, size=identity.shape), columns=["f1", "f2", "f3"])
    return features, labels, groups


def test_no_learner_is_ever_in_both_training_and_test_folds() -> None:
    features, labels, groups = learner_fingerprint_data()
    folds = grouped_folds(labels, groups, folds=5, seed=3)
    tested = []
    for train, test in folds:
        assert not set(groups.iloc[train]) & set(groups.iloc[test])
        tested.extend(test)
    assert sorted(tested) == list(range(len(labels)))                              # every row tested exactly once


def test_grouped_check_does_not_reward_memorising_learners() -> None:
    # The leak this guards against: with row-wise folds a nearest-learner memoriser scores high.
    features, labels, groups = learner_fingerprint_data()
    from sklearn.neighbors import KNeighborsClassifier
    leaky = cross_val_predict(KNeighborsClassifier(1), features, labels, cv=KFold(5, shuffle=True, random_state=0))
    assert cohen_kappa_score(labels, leaky) > 0.9
    result = check_dimension(features, labels, groups, "affect")
    assert result.learners == 30 and result.folds == DEFAULT_FOLDS
    assert result.model.kappa < 0.35                                                  # chance level, not 0.9


def test_signal_beats_the_baselines() -> None:
    rng = np.random.default_rng(1)
    groups = pd.Series(np.repeat([f"p-{number}" for number in range(20)], 25))
    labels = pd.Series(rng.choice(["on_task", "off_task"], len(groups)))
    features = pd.DataFrame({"events_per_minute": np.where(labels == "on_task", 6.0, 1.0) + rng.normal(0, 1.5, len(groups)),
                             "noise": rng.normal(size=len(groups))})
    result = check_dimension(features, labels, groups, "activity")
    # classes separated by 5 / 1.5 standard deviations: ~95 % accuracy expected (from the normal CDF)
    assert result.model.kappa > 0.8 and result.model.auc > 0.95
    assert result.majority_baseline.kappa == pytest.approx(0.0) and result.majority_baseline.auc == pytest.approx(0.5)
    assert abs(result.stratified_baseline.kappa) < 0.2
    assert result.codes == labels.value_counts().sort_index().to_dict()


def test_three_codes_get_a_one_vs_rest_auc() -> None:
    rng = np.random.default_rng(2)
    groups = pd.Series(np.repeat([f"p-{number}" for number in range(15)], 20))
    labels = pd.Series(rng.choice(["focused", "bored", "confused"], len(groups)))
    centre = labels.map({"focused": 0.0, "bored": 4.0, "confused": 8.0})
    features = pd.DataFrame({"x": centre + rng.normal(0, 1, len(groups))})
    result = check_dimension(features, labels, groups, "affect")
    assert result.model.auc > 0.9 and result.model.kappa > 0.7


def test_check_command_reports_every_dimension_as_json(tmp_path) -> None:
    path, _ = export_file(tmp_path)
    result = run_cli("check", path, "--json")
    assert result.returncode == 0, result.stderr
    payload = json.loads(result.stdout)
    assert set(payload["dimensions"]) == {"activity", "affect"}
    activity = payload["dimensions"]["activity"]
    assert activity["learners"] == 10 and activity["folds"] == 5
    assert activity["model"]["kappa"] > activity["majority_baseline"]["kappa"]     # event rate reveals on/off task


def test_check_command_prints_a_table_for_the_named_dimension(tmp_path, capsys) -> None:
    path, _ = export_file(tmp_path)
    assert main(["check", str(path), "--dimension", "affect"]) == 0              # in-process: the same entry point
    printed = capsys.readouterr().out
    assert "affect" in printed and "activity" not in printed and "kappa" in printed


def test_check_command_rejects_bad_input_with_one_line(tmp_path) -> None:
    assert_user_error(run_cli("check", tmp_path / "missing.parquet"), "missing.parquet", "no such file")
    path, _ = export_file(tmp_path)
    assert_user_error(run_cli("check", path, "--dimension", "mood"), "mood", "no such dimension")
    (tmp_path / "broken.parquet").write_text("not parquet")
    assert_user_error(run_cli("check", tmp_path / "broken.parquet"), "broken.parquet")


def test_check_needs_two_folds(tmp_path, capsys) -> None:
    path, _ = export_file(tmp_path)
    assert main(["check", str(path), "--folds", "1"]) == 2
    assert "--folds" in capsys.readouterr().err
