"""Is there signal?  A grouped, cross-validated check of a simple detector per dimension.

Folds are made of whole learners (StratifiedGroupKFold on the group column), because
one learner's windows are alike: a detector tested on a learner it was trained on looks
far better than it will be on a new learner.  The model is deliberately plain (median
imputation, standardisation, class-balanced logistic regression); it is a sanity check
of the labelled windows, not a tuned detector.  Out-of-fold predictions of all folds
are pooled and scored with Cohen's kappa and AUC (one-vs-rest macro average for more
than two codes), beside two baselines scored on the same folds: always the training
fold's majority code, and random codes drawn with the training fold's frequencies.
"""
from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import ClassifierMixin, clone
from sklearn.dummy import DummyClassifier
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import cohen_kappa_score, roc_auc_score
from sklearn.model_selection import StratifiedGroupKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from export.reader import read_windows, windows_xy
from sync.errors import InputError

DEFAULT_FOLDS = 5


@dataclass(frozen=True)
class Score:
    """Pooled out-of-fold figures of one model; None where undefined (a single code)."""

    kappa: float | None
    auc: float | None


@dataclass(frozen=True)
class DimensionCheck:
    """The check of one dimension."""

    dimension: str
    rows: int
    learners: int
    folds: int
    codes: dict[str, int]
    model: Score
    majority_baseline: Score
    stratified_baseline: Score

    def as_dict(self) -> dict:
        return asdict(self)


def grouped_folds(labels: pd.Series, groups: pd.Series, folds: int = DEFAULT_FOLDS, seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train rows, test rows) per fold; every learner's rows sit in exactly one test fold."""
    splits = min(folds, groups.nunique())
    splitter = StratifiedGroupKFold(n_splits=splits, shuffle=True, random_state=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # "least populated class" when a code is rare
        return list(splitter.split(np.zeros(len(labels)), labels.to_numpy(), groups.to_numpy()))


def detector() -> ClassifierMixin:
    """The plain model the check fits."""
    return make_pipeline(
        SimpleImputer(strategy="median", keep_empty_features=True),
        StandardScaler(),
        LogisticRegression(max_iter=1000, class_weight="balanced"),
    )


def out_of_fold(
    model: ClassifierMixin, features: pd.DataFrame, labels: pd.Series, folds: list[tuple[np.ndarray, np.ndarray]],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(codes in order, predicted code per row, probability per row and code) from the folds."""
    codes = np.unique(labels.to_numpy())
    predicted = np.empty(len(labels), dtype=object)
    probability = np.zeros((len(labels), len(codes)))
    for train, test in folds:
        fitted = clone(model).fit(features.iloc[train], labels.iloc[train])
        predicted[test] = fitted.predict(features.iloc[test])
        columns = np.searchsorted(codes, fitted.classes_)
        probability[np.ix_(test, columns)] = fitted.predict_proba(features.iloc[test])
    return codes, predicted, probability


def score(labels: pd.Series, codes: np.ndarray, predicted: np.ndarray, probability: np.ndarray) -> Score:
    """Cohen's kappa and AUC of pooled out-of-fold predictions."""
    truth = labels.to_numpy()
    if len(codes) < 2:
        return Score(kappa=None, auc=None)
    kappa = cohen_kappa_score(truth, predicted)
    if len(codes) == 2:
        auc = roc_auc_score(truth == codes[1], probability[:, 1])
    else:
        auc = roc_auc_score(truth, probability, multi_class="ovr", average="macro", labels=codes)
    return Score(kappa=float(kappa) if np.isfinite(kappa) else None, auc=float(auc))


def check_dimension(
    features: pd.DataFrame, labels: pd.Series, groups: pd.Series, dimension: str,
    folds: int = DEFAULT_FOLDS, seed: int = 0,
) -> DimensionCheck:
    """The model and both baselines on the same learner-grouped folds."""
    splits = grouped_folds(labels, groups, folds, seed)
    for train, _ in splits:
        if labels.iloc[train].nunique() < 2:
            raise InputError(None, f"dimension {dimension}", f"a fold of learners holds only code "
                             f"{labels.iloc[train].iloc[0]!r}; each code needs windows of several learners "
                             "(check fewer dimensions or code more learners)")
    scores = {}
    for name, model in (
        ("model", detector()),
        ("majority", DummyClassifier(strategy="most_frequent")),
        ("stratified", DummyClassifier(strategy="stratified", random_state=seed)),
    ):
        scores[name] = score(labels, *out_of_fold(model, features, labels, splits))
    return DimensionCheck(
        dimension=dimension, rows=len(labels), learners=int(groups.nunique()), folds=len(splits),
        codes={str(code): int(count) for code, count in labels.value_counts().sort_index().items()},
        model=scores["model"], majority_baseline=scores["majority"], stratified_baseline=scores["stratified"],
    )


def refuse_eventless(table: pd.DataFrame, manifest: dict, path: Path) -> None:
    """A file whose windows hold no log event (every feature zero or missing, or every
    event_count zero) describes no behaviour: a detector "trained" on it is meaningless,
    and it almost always means the roster's log ids or the clock models are wrong."""
    features = table[manifest["feature_columns"]].astype("float64")
    no_events = "event_count" in features and bool((features["event_count"].fillna(0) == 0).all())
    if no_events or bool((features.fillna(0) == 0).all().all()):
        raise InputError(path, "features", "every window has zero log events, so every feature is empty; check "
                                           "roster.csv's log_id against the logs and the clock models, then export again")


def check_windows(path: Path, dimensions: list[str] | None = None, folds: int = DEFAULT_FOLDS, seed: int = 0) -> list[DimensionCheck]:
    """Check every (or the named) dimension of an exported windows file."""
    table, manifest = read_windows(path)  # one read for every dimension
    refuse_eventless(table, manifest, path)
    results = []
    for dimension in dimensions or manifest["label_columns"]:
        features, labels, groups = windows_xy(table, manifest, path, dimension)
        if groups.nunique() < 2:
            raise InputError(path, dimension, "needs labelled windows of at least two learners for grouped folds")
        if labels.nunique() < 2:
            raise InputError(path, dimension, f"every labelled window has code {labels.iloc[0]!r}; a detector "
                             "needs at least two codes to tell apart")
        results.append(check_dimension(features, labels, groups, dimension, folds, seed))
    return results
