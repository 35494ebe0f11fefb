"""How far a detector's probabilities can be taken at their word: Brier score and reliability curve.

Brier score (Brier, 1950): the mean over windows of the squared distance between the
predicted probabilities and the one-hot true code, summed over codes; with two codes it
is halved, which makes it the familiar binary form (squared error of the second code's
probability, as scikit-learn's ``brier_score_loss``).  0 is perfect.

Reliability curve: predicted probabilities cut into ``BINS`` equal-width bins; per bin
the mean predicted probability, the observed share of windows with that code, and the
count.  With two codes it is the second code's curve (scikit-learn's ``calibration_curve``
with the uniform strategy gives the same points); with more codes every (window, code)
pair is pooled, one-vs-rest.  A well-calibrated detector's points lie on the diagonal.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

BINS = 10


@dataclass(frozen=True)
class ReliabilityBin:
    low: float
    high: float
    mean_predicted: float
    observed: float
    windows: int


@dataclass(frozen=True)
class Calibration:
    brier: float
    brier_definition: str
    reliability_definition: str
    reliability: list[ReliabilityBin]

    def as_dict(self) -> dict:
        return asdict(self)


def one_hot(truth: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """(rows, codes) 0/1 matrix of the true code."""
    return (np.asarray(truth)[:, None] == codes[None, :]).astype(float)


def brier_score(truth: np.ndarray, codes: np.ndarray, probability: np.ndarray) -> float:
    """Multi-code Brier score; halved with two codes (see module docstring)."""
    total = ((probability - one_hot(truth, codes)) ** 2).sum(axis=1).mean()
    return float(total / 2.0 if len(codes) == 2 else total)


def reliability_curve(truth: np.ndarray, codes: np.ndarray, probability: np.ndarray,
                      bins: int = BINS) -> list[ReliabilityBin]:
    """Non-empty bins of the reliability curve, lowest first."""
    hits = one_hot(truth, codes)
    if len(codes) == 2:
        predicted, observed = probability[:, 1], hits[:, 1]
    else:
        predicted, observed = probability.ravel(), hits.ravel()
    edges = np.linspace(0.0, 1.0, bins + 1)
    index = np.searchsorted(edges[1:-1], predicted)  # a probability on an edge falls in the lower bin
    counts = np.bincount(index, minlength=bins)
    mean_predicted = np.bincount(index, weights=predicted, minlength=bins)
    share = np.bincount(index, weights=observed, minlength=bins)
    return [ReliabilityBin(low=float(edges[b]), high=float(edges[b + 1]),
                           mean_predicted=float(mean_predicted[b] / counts[b]), observed=float(share[b] / counts[b]),
                           windows=int(counts[b]))
            for b in np.flatnonzero(counts)]


def calibration(truth: np.ndarray, codes: np.ndarray, probability: np.ndarray) -> Calibration:
    """Brier score and reliability curve of out-of-fold probabilities."""
    two = len(codes) == 2
    return Calibration(
        brier=brier_score(truth, codes, probability),
        brier_definition=("mean squared error of the probability of code " f"{codes[1]!s}" if two
                          else "mean over windows of the summed squared error over codes (Brier, 1950)"),
        reliability_definition=(f"probability of code {codes[1]!s}, {BINS} equal-width bins" if two
                                else f"every (window, code) pair pooled one-vs-rest, {BINS} equal-width bins"),
        reliability=reliability_curve(truth, codes, probability),
    )
