"""Cluster bootstrap: resample learners, not single observations.

One learner's observations are correlated (the same person, the same habits), so an
interval that resamples single units is too narrow.  A resample draws as many
clusters as there are, with replacement; the number of times each cluster is drawn
is a multinomial count, so the resampled tables are ``weights @ per-cluster tables``.
"""
from __future__ import annotations

import warnings

import numpy as np

CONFIDENCE = 0.95
DEFAULT_RESAMPLES = 1000


def cluster_weights(clusters: int, resamples: int, seed: int) -> np.ndarray:
    """(resamples, clusters) counts: how often each cluster is drawn in each resample."""
    generator = np.random.default_rng(seed)
    if clusters == 0:
        return np.zeros((resamples, 0))
    return generator.multinomial(clusters, np.full(clusters, 1.0 / clusters), size=resamples).astype(float)


def percentile_intervals(points: np.ndarray, resampled: np.ndarray,
                         confidence: float = CONFIDENCE) -> tuple[np.ndarray, np.ndarray]:
    """Percentile intervals of (resamples, figures) columns; NaN where the point is undefined.

    Resamples in which a figure is undefined (e.g. only one category drawn) are left out.
    """
    points = np.asarray(points, dtype=float)
    if resampled.shape[0] == 0:
        nan = np.full(points.shape, np.nan)
        return nan, nan
    tail = (1.0 - confidence) / 2.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns give NaN, as wanted
        low, high = np.nanquantile(resampled, [tail, 1.0 - tail], axis=0)
    undefined = ~np.isfinite(points)
    return np.where(undefined, np.nan, low), np.where(undefined, np.nan, high)
