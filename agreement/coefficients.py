"""Agreement coefficients computed from count tables, batched over a leading axis.

Every function takes tables with any leading shape (one table, or one per bootstrap
resample) and returns an array of that leading shape, NaN where the coefficient is
undefined (e.g. chance agreement of 1 when only one category occurs).  Working from
tables rather than from raw codes is what lets the bootstrap resample thousands of
times with one matrix product (see ``agreement.bootstrap``).

Tables:
  contingency  (..., k, k)  rows: first coder's code, columns: second coder's code,
                            summed over unordered coder pairs within units
  coincidence  (..., k, k)  Krippendorff's coincidence matrix (each unit's ordered
                            pairable values weighted 1 / (m_u - 1))
  fleiss parts (..., ) sum over units of P_i, (...,) units, (..., k) code totals
"""
from __future__ import annotations

import numpy as np

# Landis & Koch (1977), Biometrics 33:159-174, benchmark table (p. 165, from memory):
# < 0 poor; 0.00-0.20 slight; 0.21-0.40 fair; 0.41-0.60 moderate; 0.61-0.80
# substantial; 0.81-1.00 almost perfect.  Pairs: (upper bound, label).
LANDIS_KOCH_BANDS: tuple[tuple[float, str], ...] = (
    (0.20, "slight"),
    (0.40, "fair"),
    (0.60, "moderate"),
    (0.80, "substantial"),
    (1.0, "almost perfect"),
)


def _divide(numerator: np.ndarray, denominator: np.ndarray) -> np.ndarray:
    """numerator / denominator with NaN where the denominator is (numerically) zero."""
    numerator = np.asarray(numerator, dtype=float)
    denominator = np.asarray(denominator, dtype=float)
    defined = np.abs(denominator) > 1e-12
    safe = np.where(defined, denominator, 1.0)
    return np.where(defined, numerator / safe, np.nan)


def disagreement_weights(k: int, weighting: str) -> np.ndarray:
    """Cohen's disagreement weights: "none" (0/1), "linear" |i-j|, "quadratic" (i-j)^2."""
    index = np.arange(k, dtype=float)
    difference = np.abs(index[:, None] - index[None, :])
    if weighting == "none":
        return (difference > 0).astype(float)
    if weighting == "linear":
        return difference
    if weighting == "quadratic":
        return difference**2
    raise ValueError(f"unknown weighting {weighting!r}")


def kappa_from_contingency(table: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Cohen's (weighted) kappa = 1 - observed / chance-expected weighted disagreement."""
    total = table.sum(axis=(-2, -1))
    rows = table.sum(axis=-1)
    columns = table.sum(axis=-2)
    observed = (table * weights).sum(axis=(-2, -1))
    expected = np.einsum("...i,ij,...j->...", rows, weights, columns)
    # observed/total over expected/total^2  ==  observed * total / expected
    return 1.0 - _divide(observed * total, expected)


def observed_agreement(table: np.ndarray) -> np.ndarray:
    """Share of pairs on the diagonal of a contingency table."""
    return _divide(np.trace(table, axis1=-2, axis2=-1), table.sum(axis=(-2, -1)))


def chance_agreement(table: np.ndarray) -> np.ndarray:
    """Agreement expected from the two coders' marginals."""
    total = table.sum(axis=(-2, -1))
    product = (table.sum(axis=-1) * table.sum(axis=-2)).sum(axis=-1)
    return _divide(product, total**2)


def max_kappa(table: np.ndarray) -> np.ndarray:
    """The largest kappa the two coders' marginals allow (Cohen 1960, p. 42)."""
    total = table.sum(axis=(-2, -1))
    best = _divide(np.minimum(table.sum(axis=-1), table.sum(axis=-2)).sum(axis=-1), total)
    chance = chance_agreement(table)
    return _divide(best - chance, 1.0 - chance)


def pabak(table: np.ndarray) -> np.ndarray:
    """Prevalence- and bias-adjusted kappa for k categories: (k p_o - 1) / (k - 1)."""
    k = table.shape[-1]
    if k < 2:
        return np.full(table.shape[:-2], np.nan)
    return (k * observed_agreement(table) - 1.0) / (k - 1)


def per_code_kappa(table: np.ndarray) -> np.ndarray:
    """One-vs-rest Cohen's kappa for each code: (..., k) from the collapsed 2x2 tables."""
    total = table.sum(axis=(-2, -1))[..., None]
    both = np.diagonal(table, axis1=-2, axis2=-1)
    first = table.sum(axis=-1)
    second = table.sum(axis=-2)
    neither = total - first - second + both
    observed = _divide(both + neither, total)
    chance = _divide(first * second + (total - first) * (total - second), total**2)
    return _divide(observed - chance, 1.0 - chance)


def fleiss_kappa(sum_agreement: np.ndarray, units: np.ndarray, code_totals: np.ndarray) -> np.ndarray:
    """Fleiss (1971) kappa, generalised to units with differing numbers of codes.

    ``sum_agreement`` is the sum over units of P_i = sum_j n_ij (n_ij - 1) / (m_i (m_i - 1));
    with a constant number of codes per unit this is exactly Fleiss' statistic.
    """
    mean_agreement = _divide(sum_agreement, units)
    shares = _divide(code_totals, code_totals.sum(axis=-1, keepdims=True))
    chance = (shares**2).sum(axis=-1)
    return _divide(mean_agreement - chance, 1.0 - chance)


def alpha_distance(values: np.ndarray, marginals: np.ndarray, level: str) -> np.ndarray:
    """Krippendorff's squared difference function delta^2(c, k), batched over marginals.

    Krippendorff (2011), "Computing Krippendorff's Alpha-Reliability", section on
    difference functions: nominal 0/1; ordinal uses the marginal frequencies n_g of the
    coincidence matrix between the two ranks; interval (c-k)^2; ratio ((c-k)/(c+k))^2.
    """
    k = values.shape[0]
    if level == "nominal":
        return np.broadcast_to(1.0 - np.eye(k), marginals.shape[:-1] + (k, k))
    if level == "ordinal":
        cumulative = np.cumsum(marginals, axis=-1)
        low = np.minimum.outer(np.arange(k), np.arange(k))
        high = np.maximum.outer(np.arange(k), np.arange(k))
        between = cumulative[..., high] - cumulative[..., low] + marginals[..., low]
        ends = (marginals[..., :, None] + marginals[..., None, :]) / 2.0
        return (between - ends) ** 2
    difference = values[:, None] - values[None, :]
    if level == "interval":
        return np.broadcast_to(difference**2, marginals.shape[:-1] + (k, k))
    if level == "ratio":
        total = values[:, None] + values[None, :]
        ratio = np.where(total != 0, difference / np.where(total != 0, total, 1.0), 0.0)
        return np.broadcast_to(ratio**2, marginals.shape[:-1] + (k, k))
    raise ValueError(f"unknown level {level!r}")


def alpha_from_coincidence(coincidence: np.ndarray, values: np.ndarray, level: str) -> np.ndarray:
    """Krippendorff's alpha = 1 - (n - 1) sum o_ck d_ck / sum n_c n_k d_ck."""
    marginals = coincidence.sum(axis=-1)
    total = marginals.sum(axis=-1)
    distance = alpha_distance(values, marginals, level)
    observed = (coincidence * distance).sum(axis=(-2, -1))
    expected = np.einsum("...i,...ij,...j->...", marginals, distance, marginals)
    alpha = 1.0 - _divide((total - 1.0) * observed, expected)
    return np.where(total > 1, alpha, np.nan)


def landis_koch_band(kappa: float | None) -> str:
    """Landis & Koch (1977) label: poor (< 0), slight, fair, moderate, substantial, almost perfect."""
    if kappa is None or not np.isfinite(kappa):
        return "undefined"
    if kappa < 0:
        return "poor"
    for upper, label in LANDIS_KOCH_BANDS:
        if kappa <= upper:
            return label
    return LANDIS_KOCH_BANDS[-1][1]
