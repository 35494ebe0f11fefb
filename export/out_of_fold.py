"""How a detector is scored without leaking a learner: folds of whole learners, pooled out-of-fold figures.

Folds are made of whole learners (StratifiedGroupKFold on the group column), because one
learner's windows are alike: a detector tested on a learner it was trained on looks far
better than it will be on a new learner.  Out-of-fold predictions of all folds are pooled
and scored with Cohen's kappa and AUC: the AUC of the second code's probability with two
codes, the one-vs-rest macro average over codes with more (scikit-learn's
``roc_auc_score(multi_class="ovr", average="macro")``).
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.metrics import cohen_kappa_score, roc_auc_score
from sklearn.model_selection import StratifiedGroupKFold
from sync.json_numbers import finite_or_none

DEFAULT_FOLDS = 5


def auc_definition(codes: np.ndarray) -> str:
    """The AUC's definition in words, for the output."""
    if len(codes) == 2:
        return f"ROC AUC of the probability of code {codes[1]!s} (two codes)"
    return "one-vs-rest ROC AUC per code, macro-averaged over codes"


@dataclass(frozen=True)
class Score:
    """Pooled out-of-fold figures of one model; None where undefined (a single code)."""

    kappa: float | None
    auc: float | None


def grouped_folds(labels: pd.Series, groups: pd.Series, folds: int = DEFAULT_FOLDS, seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train rows, test rows) per fold; every learner's rows sit in exactly one test fold."""
    splits = min(folds, groups.nunique())
    splitter = StratifiedGroupKFold(n_splits=splits, shuffle=True, random_state=seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # "least populated class" when a code is rare
        return list(splitter.split(np.zeros(len(labels)), labels.to_numpy(), groups.to_numpy()))


def score(labels: pd.Series | np.ndarray, codes: np.ndarray, predicted: np.ndarray, probability: np.ndarray) -> Score:
    """Cohen's kappa and AUC of pooled out-of-fold predictions (codes absent from ``labels`` are left out of the AUC)."""
    truth = np.asarray(labels)
    present = np.isin(codes, truth)
    if present.sum() < 2:
        return Score(kappa=None, auc=None)
    kappa = cohen_kappa_score(truth, predicted)
    if len(codes) == 2:
        auc = roc_auc_score(truth == codes[1], probability[:, 1])
    else:  # scikit-learn's one-vs-rest macro average, over the codes present (an absent code has no AUC)
        auc = np.mean([roc_auc_score(truth == code, probability[:, index])
                       for index, code in enumerate(codes) if present[index]])
    return Score(kappa=finite_or_none(kappa), auc=float(auc))
