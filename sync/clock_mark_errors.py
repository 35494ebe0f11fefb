"""The sync-mark clock line's final fit and honest standard errors.

Nearest-event matching hides part of the error: where a learner's events come closer
together than the coder's reaction spread, a mark is matched to whichever event lies
nearest the fitted line, so its residual is smaller than its true error and the line
is pulled towards itself.  A straight-line covariance from those residuals states about
half the real error over the span (tests/perf/test_mark_error_calibration_perf.py).

So the matching is made part of the model: each kept mark was made at ONE of its
learner's events within the outlier limit of the line, which one unknown (equal odds),
plus normal reaction noise.  This finite-mixture likelihood is maximised over (offset,
drift, reaction SD) by EM (Dempster, Laird & Rubin 1977: the E step weighs every
candidate event, the M step is a weighted least-squares line), and the covariance is the
inverse of the observed information of (offset, drift) by the missing-information
principle (Louis 1982: the complete-data information expected over the candidates minus
the variance of the complete-data score), scaled by n / (n - p) as least squares is.

Over the observed span the line's error is stated as a simultaneous band: the pointwise
standard error at the span's ends times sqrt(p F(0.95; p, n - p)) / 2 (Working & Hotelling
1929, from memory), so that 2 of it covers the whole span, not one instant, with about
95 % confidence, and a few marks give the wide band a t or F quantile calls for.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import f as f_distribution

EM_ROUNDS = 200
EM_TOLERANCE_S = 1e-9
# Below any key press's jitter; keeps the likelihood finite when marks sit exactly on events.
MIN_REACTION_SD_S = 1e-3
BAND_LEVEL = 0.95


@dataclass(frozen=True)
class MarkLine:
    """Offset at the reference (s), drift (s per s), reaction SD (s), and the standard
    errors: at the reference, and over the span as a simultaneous band / 2."""

    offset_s: float
    slope: float
    reaction_sd_s: float
    offset_error_s: float
    span_error_s: float


def fit_mark_line(gap_s: np.ndarray, since_s: np.ndarray, candidate: np.ndarray, offset_s: float,
                  slope: float | None, sigma_s: float, span_since_s: np.ndarray) -> MarkLine:
    """The mixture fit and its errors (module docstring).

    ``gap_s``/``since_s`` (marks x candidates): device - event time and event time since
    the reference for each mark's candidate events, ``candidate`` marks the real ones
    (every row has at least one).  ``slope`` None fits no drift (offset only).  Starts
    from ``offset_s``, ``slope`` and ``sigma_s``; ``span_since_s`` are the span's ends on
    the same axis.  NaN errors with fewer marks than parameters plus one, or when the
    candidates leave the line unidentified (information not positive definite).
    """
    marks = len(gap_s)
    with_drift = slope is not None
    parameters = 2 if with_drift else 1
    slope = float(slope) if with_drift else 0.0
    sigma = max(float(sigma_s), MIN_REACTION_SD_S)
    since = np.where(candidate, since_s, 0.0) if with_drift else np.zeros_like(since_s)
    gap = np.where(candidate, gap_s, 0.0)
    weight = _responsibilities(gap - offset_s - slope * since, sigma, candidate)
    for _ in range(EM_ROUNDS):
        offset_new, slope_new = _weighted_line(gap, since, weight, with_drift)
        residual = gap - offset_new - slope_new * since
        sigma_new = max(float(np.sqrt(np.sum(weight * residual ** 2) / marks)), MIN_REACTION_SD_S)
        moved = max(abs(offset_new - offset_s), abs(sigma_new - sigma),
                    abs(slope_new - slope) * float(np.abs(since).max(initial=0.0)))
        offset_s, slope, sigma = offset_new, slope_new, sigma_new
        weight = _responsibilities(gap - offset_s - slope * since, sigma, candidate)
        if moved < EM_TOLERANCE_S:
            break
    nan = float("nan")
    if marks <= parameters:
        return MarkLine(float(offset_s), float(slope), sigma, nan, nan)
    covariance = _louis_covariance(gap - offset_s - slope * since, since, weight, sigma, with_drift)
    if covariance is None:
        return MarkLine(float(offset_s), float(slope), sigma, nan, nan)
    covariance = covariance * marks / (marks - parameters)
    ends = np.column_stack([np.ones(len(span_since_s)), span_since_s])[:, :parameters]
    pointwise = np.sqrt(np.einsum("ij,jk,ik->i", ends, covariance, ends)).max()
    band = np.sqrt(parameters * f_distribution.ppf(BAND_LEVEL, parameters, marks - parameters)) / 2
    return MarkLine(float(offset_s), float(slope), sigma, float(np.sqrt(covariance[0, 0])),
                    float(pointwise * band))


def _responsibilities(residual: np.ndarray, sigma: float, candidate: np.ndarray) -> np.ndarray:
    """Each candidate's probability of being the marked event (E step), rows summing to 1."""
    log_density = np.where(candidate, -0.5 * (residual / sigma) ** 2, -np.inf)
    weight = np.exp(log_density - log_density.max(axis=1, keepdims=True))
    return weight / weight.sum(axis=1, keepdims=True)


def _weighted_line(gap: np.ndarray, since: np.ndarray, weight: np.ndarray, with_drift: bool) -> tuple[float, float]:
    """M step: weighted least squares of gap on since (or the weighted mean without drift)."""
    total = weight.sum()
    if not with_drift:
        return float(np.sum(weight * gap) / total), 0.0
    x_mean, y_mean = np.sum(weight * since) / total, np.sum(weight * gap) / total
    spread = np.sum(weight * (since - x_mean) ** 2)
    slope = float(np.sum(weight * (since - x_mean) * (gap - y_mean)) / spread) if spread > 0 else 0.0
    return float(y_mean - slope * x_mean), slope


def _louis_covariance(residual: np.ndarray, since: np.ndarray, weight: np.ndarray, sigma: float,
                      with_drift: bool) -> np.ndarray | None:
    """Inverse observed information of (offset[, slope]) by Louis's formula, the reaction SD
    held at its estimate (for a normal line it is orthogonal to them); None when it is not
    positive definite."""
    columns = np.stack([np.ones_like(since), since] if with_drift else [np.ones_like(since)], -1)
    residual = np.where(weight > 0, residual, 0.0)
    score = residual[..., None] * columns / sigma ** 2             # complete-data score per (mark, candidate)
    expected = np.einsum("nk,nki,nkj->ij", weight, columns, columns) / sigma ** 2  # complete-data information
    mean_score = np.einsum("nk,nki->ni", weight, score)
    missing = np.einsum("nk,nki,nkj->ij", weight, score, score) - mean_score.T @ mean_score
    information = expected - missing
    if not np.all(np.linalg.eigvalsh(information) > 0):
        return None
    return np.linalg.inv(information)
