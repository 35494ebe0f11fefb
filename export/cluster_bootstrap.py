"""Intervals for detector figures that resample learners, not windows.

One learner's windows are alike, so an interval that resamples single windows is too
narrow.  A resample draws a group's learners with replacement (multinomial counts, the
approach of agreement/bootstrap.py, kept here because export/ may not import agreement/).
Every figure is a function of per-learner tables, so a resample is a weighted sum:

    kappa, recall   per-learner confusion matrices (true code x predicted code)
    AUC             per code, a learner-by-learner matrix of ordered pairs: entry [a, b]
                    counts (positive window of learner a, negative window of learner b)
                    pairs the detector ranks correctly, ties counting one half; the
                    resampled AUC is w M w / ((w . positives)(w . negatives)), exactly the
                    AUC of the resampled windows
    agreement       per-learner counts of windows coded by two or more coders, and of
                    those on which every coder gave the same code

AUC is one-vs-rest, macro-averaged over codes (the codes present in the sample); with two
codes it is the AUC of the second code's probability.

Intervals are 95 % expanded percentile intervals (Hesterberg, 2015, "What teachers should
know about the bootstrap", The American Statistician 69(4)): a plain percentile interval
is too narrow with few clusters, so the tail share is widened to the normal tail at
sqrt(n / (n - 1)) * t(n - 1), n the number of learners resampled.  Measured on the demo's
null twin (12 learners per site, 20 seeds): the plain interval flagged 3 of 20.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy.stats import norm
from scipy.stats import t as student_t

CONFIDENCE = 0.95
DEFAULT_RESAMPLES = 1000


def cluster_weights(clusters: int, resamples: int, rng: np.random.Generator) -> np.ndarray:
    """(resamples, clusters) counts: how often each cluster is drawn in each resample."""
    if clusters == 0:
        return np.zeros((resamples, 0))
    return rng.multinomial(clusters, np.full(clusters, 1.0 / clusters), size=resamples).astype(float)


def expanded_tail(clusters: int | None, confidence: float = CONFIDENCE) -> float:
    """The tail share of the expanded percentile interval for ``clusters`` learners (plain without)."""
    tail = (1.0 - confidence) / 2.0
    if clusters is None or clusters < 2:
        return tail
    return float(norm.sf(np.sqrt(clusters / (clusters - 1.0)) * student_t.isf(tail, clusters - 1)))


def percentile_interval(resampled: np.ndarray, clusters: int | None = None,
                        confidence: float = CONFIDENCE) -> tuple[float | None, float | None]:
    """(low, high) of the finite resampled values, expanded for ``clusters`` learners; None when there are none."""
    finite = resampled[np.isfinite(resampled)]
    if finite.size == 0:
        return None, None
    tail = expanded_tail(clusters, confidence)
    low, high = np.quantile(finite, [tail, 1.0 - tail])
    return float(low), float(high)


def kappa_of(confusion: np.ndarray) -> np.ndarray:
    """Cohen's kappa of confusion matrices stacked on the leading axes (NaN where undefined)."""
    total = confusion.sum(axis=(-2, -1))
    with np.errstate(invalid="ignore", divide="ignore"):
        observed = np.trace(confusion, axis1=-2, axis2=-1) / total
        expected = (confusion.sum(axis=-1) * confusion.sum(axis=-2)).sum(axis=-1) / total**2
        return (observed - expected) / (1.0 - expected)


@dataclass(frozen=True)
class LearnerTables:
    """Per-learner tables of one set of out-of-fold predictions (see module docstring)."""

    confusion: np.ndarray       # (learners, codes, codes)
    pairs: list[np.ndarray]     # per AUC code: (learners, learners)
    positives: np.ndarray       # (AUC codes, learners)
    negatives: np.ndarray       # (AUC codes, learners)
    multi_coded: np.ndarray     # (learners,)
    agreed: np.ndarray          # (learners,)

    def figures(self, members: np.ndarray, weights: np.ndarray) -> dict[str, np.ndarray]:
        """Figures of the learners ``members`` weighted by ``weights`` (resamples, members):
        kappa (r,), auc (r,), recall (r, codes), agreement (r,)."""
        confusion = np.tensordot(weights, self.confusion[members], axes=(1, 0))
        with np.errstate(invalid="ignore", divide="ignore"):
            recall = np.diagonal(confusion, axis1=1, axis2=2) / confusion.sum(axis=2)
            aucs = []
            for code, pairs in enumerate(self.pairs):
                block = pairs[np.ix_(members, members)]
                correct = ((weights @ block) * weights).sum(axis=1)
                aucs.append(correct / ((weights @ self.positives[code, members]) * (weights @ self.negatives[code, members])))
            agreement = (weights @ self.agreed[members]) / (weights @ self.multi_coded[members])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all codes undefined -> NaN, as wanted
            auc = np.nanmean(np.stack(aucs, axis=1), axis=1) if aucs else np.full(len(weights), np.nan)
        return {"kappa": kappa_of(confusion), "auc": np.where(np.isfinite(auc), auc, np.nan),
                "recall": recall, "agreement": agreement}


def ordered_pairs(score: np.ndarray, positive: np.ndarray, learner: np.ndarray, learners: int) -> np.ndarray:
    """(learners, learners): correctly ordered (positive of a, negative of b) pairs, ties one half."""
    positive_scores, positive_learner = score[positive], learner[positive]
    negative_scores, negative_learner = score[~positive], learner[~positive]
    order = np.lexsort((negative_scores, negative_learner))
    negative_scores, negative_learner = negative_scores[order], negative_learner[order]
    bounds = np.searchsorted(negative_learner, np.arange(learners + 1))
    matrix = np.zeros((learners, learners))
    for other in np.flatnonzero(np.diff(bounds)):  # a loop over learners, vectorised over windows
        theirs = negative_scores[bounds[other]:bounds[other + 1]]
        below = np.searchsorted(theirs, positive_scores, side="left")
        tied = np.searchsorted(theirs, positive_scores, side="right") - below
        matrix[:, other] = np.bincount(positive_learner, weights=below + 0.5 * tied, minlength=learners)
    return matrix


def learner_tables(truth: np.ndarray, codes: np.ndarray, predicted: np.ndarray, probability: np.ndarray,
                   learner: np.ndarray, learners: int, multi_coded: np.ndarray | None = None,
                   agreed: np.ndarray | None = None) -> LearnerTables:
    """Per-learner tables from row arrays; ``learner`` holds each row's learner index (0..learners-1)."""
    true_index = np.searchsorted(codes, truth)
    predicted_index = np.searchsorted(codes, predicted.astype(codes.dtype))
    cells = (learner * len(codes) + true_index) * len(codes) + predicted_index
    confusion = np.bincount(cells, minlength=learners * len(codes) ** 2).reshape(learners, len(codes), len(codes))
    auc_codes = [1] if len(codes) == 2 else list(range(len(codes)))
    pairs, positives, negatives = [], [], []
    for code in auc_codes:
        positive = true_index == code
        pairs.append(ordered_pairs(probability[:, code], positive, learner, learners))
        positives.append(np.bincount(learner[positive], minlength=learners))
        negatives.append(np.bincount(learner[~positive], minlength=learners))
    zeros = np.zeros(learners)
    return LearnerTables(
        confusion=confusion.astype(float), pairs=pairs, positives=np.array(positives, dtype=float),
        negatives=np.array(negatives, dtype=float),
        multi_coded=zeros if multi_coded is None else np.bincount(learner, weights=multi_coded, minlength=learners),
        agreed=zeros if agreed is None else np.bincount(learner, weights=agreed, minlength=learners),
    )
