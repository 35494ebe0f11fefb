"""How a detector's settings are chosen without a learner ever leaking: nested grouped cross-validation.

Outer folds are whole learners (``detector_check.grouped_folds``).  Inside each outer
training fold GridSearchCV tries the candidate's settings (export/detector_models.py) on
``INNER_FOLDS`` GroupKFold folds, also of whole learners, scored by log loss (a proper
score, defined for any number of codes).  scikit-learn hands ``groups`` to an inner
splitter only with metadata routing, so the whole search runs inside
``config_context(enable_metadata_routing=True)``; without it GroupKFold would refuse to
run.  BLAS and OpenMP run one thread per fit: many small fits on a shared machine only
contend for cores (measured: 16x slower logistic fits with threads on a loaded 2-core machine).  The outer loop is scikit-learn's ``cross_validate`` with the fitted searches kept,
so each fold's chosen setting is reported and each outer test fold is predicted by the
search refitted on its own training fold -- what ``cross_val_predict`` does, plus the record.
"""
from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn import config_context
from sklearn.base import clone
from sklearn.exceptions import ConvergenceWarning, FitFailedWarning
from sklearn.metrics import log_loss, make_scorer
from sklearn.model_selection import GridSearchCV, GroupKFold, cross_validate
from sklearn.pipeline import Pipeline
from threadpoolctl import threadpool_limits

from export.detector_models import Candidate, candidate

INNER_FOLDS = 3


@dataclass(frozen=True)
class OutOfFold:
    """Pooled out-of-fold predictions: codes in order, predicted code and probability per row
    (columns follow ``codes``), and the setting each outer fold's search chose."""

    codes: np.ndarray
    predicted: np.ndarray
    probability: np.ndarray
    chosen: list[dict]


def inner_scorer(codes: np.ndarray):
    """Negative log loss over every code of the dimension (an inner test fold may lack one)."""
    return make_scorer(log_loss, response_method="predict_proba", greater_is_better=False,
                       labels=list(codes)).set_score_request(sample_weight=False)


def grouped_search(model: Candidate, codes: np.ndarray, inner_folds: int) -> GridSearchCV:
    """GridSearchCV over the candidate's grid with folds of whole learners."""
    return GridSearchCV(model.pipeline, model.grid, cv=GroupKFold(n_splits=inner_folds),
                        scoring=inner_scorer(codes), error_score=np.nan, refit=True)


def tuned_out_of_fold(
    name: str, features: pd.DataFrame, labels: pd.Series, groups: pd.Series,
    folds: list[tuple[np.ndarray, np.ndarray]], seed: int = 0, weights: np.ndarray | None = None,
) -> OutOfFold:
    """Nested grouped cross-validation of model ``name``; ``weights`` (per row) reach only the fit."""
    codes = np.unique(labels.to_numpy())
    group_values = groups.to_numpy()
    inner = max(2, min(INNER_FOLDS, *(len(np.unique(group_values[train])) for train, _ in folds)))
    params = {"groups": group_values}
    if weights is not None:
        params["sample_weight"] = np.asarray(weights, dtype=float)
    with config_context(enable_metadata_routing=True), warnings.catch_warnings(), threadpool_limits(limits=1):
        warnings.simplefilter("ignore", (ConvergenceWarning, FitFailedWarning, UserWarning, RuntimeWarning))
        search = grouped_search(candidate(name, seed), codes, inner)
        result = cross_validate(search, features, labels.to_numpy(), cv=folds, params=params,
                                scoring=_unused_outer_score, return_estimator=True, error_score="raise")
    predicted = np.empty(len(labels), dtype=object)
    probability = np.zeros((len(labels), len(codes)))
    for fitted, (_, test) in zip(result["estimator"], folds):
        predicted[test], probability[test] = predict_codes(fitted, features.iloc[test], codes)
    return OutOfFold(codes=codes, predicted=predicted, probability=probability,
                     chosen=[_plain(fitted.best_params_) for fitted in result["estimator"]])


def _unused_outer_score(estimator, features, labels) -> float:
    """cross_validate always scores its test folds; the check scores the pooled predictions
    afterwards instead, so the outer score costs nothing."""
    return 0.0


def predict_codes(fitted, features: pd.DataFrame, codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(predicted code, probability per code in ``codes`` order; 0 for codes the fit never saw).

    The predicted code is the most probable one, as each of the three models' ``predict`` does."""
    own = fitted.predict_proba(features)
    probability = np.zeros((len(features), len(codes)))
    probability[:, np.searchsorted(codes, fitted.classes_)] = own
    return np.asarray(fitted.classes_[own.argmax(axis=1)], dtype=object), probability


def most_chosen(chosen: list[dict]) -> dict:
    """The setting the outer folds chose most often (the earliest on a tie)."""
    keys = [tuple(sorted(setting.items(), key=lambda item: item[0])) for setting in chosen]
    best = Counter(keys).most_common(1)[0][0]
    return dict(best)


def fit_setting(name: str, setting: dict, features: pd.DataFrame, labels: pd.Series, seed: int = 0,
                weights: np.ndarray | None = None) -> Pipeline:
    """One fit of model ``name`` with a fixed setting (transfer cells use the setting chosen most often)."""
    with config_context(enable_metadata_routing=True), warnings.catch_warnings():
        warnings.simplefilter("ignore", (ConvergenceWarning, UserWarning, RuntimeWarning))
        pipeline = clone(candidate(name, seed).pipeline).set_params(**setting)
        extra = {} if weights is None else {"sample_weight": np.asarray(weights, dtype=float)}
        return pipeline.fit(features, labels.to_numpy(), **extra)


def _plain(setting: dict) -> dict:
    """JSON-ready values (numpy scalars -> Python)."""
    return {key: value.item() if isinstance(value, np.generic) else value for key, value in setting.items()}
