"""How many paired observations a reliability session needs, by simulation.

Model: two coders with the same code shares ``prevalence`` (p) and true kappa k have
the joint table P = (1 - k) p p' + k diag(p) (its Cohen's kappa is exactly k).  For a
candidate number n of pairs we draw many n-pair tables from P and take the width of
the central 95 % of their kappas; the answer is the smallest n whose width is at most
the one asked for.  This treats pairs as independent: with several pairs per learner
the cluster bootstrap interval will be wider, so plan generously (a design effect).
The large-n answer agrees with the asymptotic variance of Fleiss, Cohen & Everitt
(1969), which the tests check.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from agreement import coefficients

PLANNING_RESAMPLES = 4000
MAXIMUM_PAIRS = 100_000


@dataclass(frozen=True)
class ReliabilityPlan:
    """The smallest number of pairs for an interval no wider than ``width``."""

    pairs: int
    width: float
    achieved_width: float
    kappa: float
    prevalence: tuple[float, ...]
    confidence: float


def joint_table(kappa: float, prevalence: np.ndarray) -> np.ndarray:
    """Cell probabilities of two coders with shares ``prevalence`` and kappa ``kappa``."""
    shares = np.asarray(prevalence, dtype=float)
    shares = shares / shares.sum()
    return (1.0 - kappa) * np.outer(shares, shares) + kappa * np.diag(shares)


def simulated_width(pairs: int, kappa: float, prevalence: np.ndarray, confidence: float = 0.95,
                    resamples: int = PLANNING_RESAMPLES, seed: int = 1) -> float:
    """Width of the central ``confidence`` share of kappas from ``pairs``-pair samples."""
    table = joint_table(kappa, prevalence)
    k = table.shape[0]
    generator = np.random.default_rng(seed)
    draws = generator.multinomial(pairs, table.ravel(), size=resamples).reshape(resamples, k, k).astype(float)
    with np.errstate(all="ignore"):
        kappas = coefficients.kappa_from_contingency(draws, coefficients.disagreement_weights(k, "none"))
    kappas = kappas[np.isfinite(kappas)]
    if kappas.size == 0:
        raise ValueError("kappa is undefined in every simulated sample (one code takes nearly every share)")
    tail = (1.0 - confidence) / 2.0
    low, high = np.quantile(kappas, [tail, 1.0 - tail])
    return float(high - low)


def pairs_needed(kappa: float, prevalence: list[float], width: float, confidence: float = 0.95,
                 seed: int = 1, resamples: int = PLANNING_RESAMPLES) -> ReliabilityPlan:
    """Smallest number of pairs whose simulated interval is at most ``width`` wide.

    Doubling finds a bracket, bisection narrows it; every candidate uses the same seed
    so the search sees a smooth curve.  Raises ValueError beyond MAXIMUM_PAIRS.
    """
    shares = np.asarray(prevalence, dtype=float)

    def width_at(pairs: int) -> float:
        return simulated_width(pairs, kappa, shares, confidence, resamples, seed)

    high = 16
    while width_at(high) > width:
        high *= 2
        if high > MAXIMUM_PAIRS:
            raise ValueError(f"more than {MAXIMUM_PAIRS} pairs would be needed")
    low = high // 2
    while high - low > 1:
        middle = (low + high) // 2
        if width_at(middle) > width:
            low = middle
        else:
            high = middle
    return ReliabilityPlan(pairs=high, width=width, achieved_width=width_at(high), kappa=kappa,
                           prevalence=tuple(float(s) for s in shares / shares.sum()), confidence=confidence)
