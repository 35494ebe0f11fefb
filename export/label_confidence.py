"""How sure is each label?  Dawid & Skene (1979) fitted by EM per dimension on the study's units.

Dawid, A. P. and Skene, A. M. (1979). Maximum likelihood estimation of observer
error-rates using the EM algorithm. Applied Statistics 28(1), 20-28.  Each unit has an
unknown true code drawn with the codes' prevalence; each coder reports code l for a
unit whose true code is k with probability theta[coder, k, l].  EM alternates the
posterior of every unit's true code (E-step, the paper's eq. 2.5) with the prevalence
and error rates that maximise the expected likelihood (M-step, eqs. 2.3-2.4), starting
from each unit's share of votes (eq. 3.1), until the log-likelihood gains less than
``TOLERANCE``.

Two forms, and the output says which was fitted:
  full      a whole confusion matrix per coder, as in the paper.  It is only
            identifiable when three or more coders coded the same units, so it is fitted
            only when at least ``FULL_FORM_UNITS`` units have three or more coders.
  one-coin  one accuracy per coder; a coder's errors are spread over the other codes in
            proportion to their prevalence:  theta[k, l] = a if l == k else
            (1 - a) * prevalence[l] / (1 - prevalence[k]).  The usual two-coder design.
            The M-step sets a to the coder's expected share correct and the prevalence
            to the mean posterior.
A dimension without any unit coded by two coders is not fitted (nothing to learn a
coder's accuracy from).  Codes meaning "could not be observed" are left out before fitting.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import logsumexp

CONFIDENCE_PREFIX = "p_"
FULL_FORM_UNITS = 20
TOLERANCE = 1e-7
MAX_ITERATIONS = 2000
FLOOR = 1e-12  # an error rate of exactly zero would make one code impossible for good


def confidence_column(dimension: str, code: str) -> str:
    """Name of the exported posterior column of one code: ``p_<dimension>_<code>``."""
    return f"{CONFIDENCE_PREFIX}{dimension}_{code}"


@dataclass(frozen=True)
class EMResult:
    """Fitted parameters: prevalence (codes,), theta (coders, true code, reported code),
    posterior (units, codes), and how the fit went."""

    prevalence: np.ndarray
    theta: np.ndarray
    posterior: np.ndarray
    log_likelihood: float
    iterations: int
    converged: bool
    trace: tuple[float, ...]  # log-likelihood after each iteration (EM never lowers it)


def _e_step(counts: np.ndarray, prevalence: np.ndarray, theta: np.ndarray) -> tuple[np.ndarray, float]:
    """(posterior per unit and true code, log-likelihood)."""
    joint = np.log(np.maximum(prevalence, FLOOR))[None, :] + np.einsum(
        "ijl,jkl->ik", counts, np.log(np.maximum(theta, FLOOR)))
    total = logsumexp(joint, axis=1, keepdims=True)
    return np.exp(joint - total), float(total.sum())


def _full_m_step(counts: np.ndarray, posterior: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    prevalence = posterior.mean(axis=0)
    theta = np.einsum("ik,ijl->jkl", posterior, counts)
    totals = theta.sum(axis=2, keepdims=True)
    uniform = np.full_like(theta, 1.0 / theta.shape[2])
    return prevalence, np.where(totals > 0, theta / np.where(totals > 0, totals, 1.0), uniform)


def _one_coin_m_step(counts: np.ndarray, posterior: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    prevalence = posterior.mean(axis=0)
    correct = np.einsum("ik,ijk->j", posterior, counts)
    accuracy = correct / np.maximum(counts.sum(axis=(0, 2)), FLOOR)
    return prevalence, one_coin_theta(accuracy, prevalence)


def one_coin_theta(accuracy: np.ndarray, prevalence: np.ndarray) -> np.ndarray:
    """(coders, true, reported) error rates of the one-coin form (see module docstring)."""
    codes = len(prevalence)
    spread = prevalence[None, :] / np.maximum(1.0 - prevalence[:, None], FLOOR)   # [k, l]
    spread[np.diag_indices(codes)] = 0.0
    spread /= np.maximum(spread.sum(axis=1, keepdims=True), FLOOR)
    theta = (1.0 - accuracy)[:, None, None] * spread[None, :, :]
    theta[:, np.arange(codes), np.arange(codes)] = accuracy[:, None]
    return theta


def dawid_skene(counts: np.ndarray, form: str = "full", tolerance: float = TOLERANCE,
                max_iterations: int = MAX_ITERATIONS) -> EMResult:
    """EM on ``counts`` (units, coders, codes): how often each coder gave each code to each unit."""
    if form not in ("full", "one-coin"):
        raise ValueError(f"form must be 'full' or 'one-coin', not {form!r}")
    m_step = _full_m_step if form == "full" else _one_coin_m_step
    votes = counts.sum(axis=1)
    posterior = votes / votes.sum(axis=1, keepdims=True)                      # eq. 3.1
    trace: list[float] = []
    for iteration in range(1, max_iterations + 1):
        prevalence, theta = m_step(counts, posterior)
        posterior, log_likelihood = _e_step(counts, prevalence, theta)
        trace.append(log_likelihood)
        if len(trace) > 1 and abs(trace[-1] - trace[-2]) < tolerance:
            return EMResult(prevalence, theta, posterior, log_likelihood, iteration, True, tuple(trace))
    return EMResult(prevalence, theta, posterior, log_likelihood, max_iterations, False, tuple(trace))


@dataclass(frozen=True)
class LabelConfidence:
    """One dimension's fit: the posterior per unit (index: unit; columns: p_<dimension>_<code>)
    and a JSON-ready summary for the manifest."""

    posterior: pd.DataFrame
    summary: dict


def unit_counts(codes_per_observation: pd.DataFrame, dimension: str) -> tuple[np.ndarray, pd.Index, list[str], list[str]]:
    """(counts (units, coders, codes), units, coders, codes) from rows of unit, coder and the dimension's code."""
    rows = codes_per_observation.dropna(subset=[dimension])
    unit, units = pd.factorize(rows["unit"], sort=True)
    coder, coders = pd.factorize(rows["coder"].astype(str), sort=True)
    code, codes = pd.factorize(rows[dimension].astype(str), sort=True)
    counts = np.zeros((len(units), len(coders), len(codes)))
    np.add.at(counts, (unit, coder, code), 1.0)
    return counts, pd.Index(units), [str(c) for c in coders], [str(c) for c in codes]


def fit_label_confidence(codes_per_observation: pd.DataFrame, dimension: str,
                         could_not_observe: str | None = None) -> LabelConfidence | None:
    """Dawid & Skene on one dimension; None when no unit has two coders.

    ``codes_per_observation``: one row per observation with ``unit``, ``coder`` and the
    dimension's code (NA when not coded).
    """
    rows = codes_per_observation[["unit", "coder", dimension]]
    if could_not_observe is not None:
        rows = rows[rows[dimension].astype("string").ne(could_not_observe).fillna(True)]
    counts, units, coders, codes = unit_counts(rows, dimension)
    coders_per_unit = (counts.sum(axis=2) > 0).sum(axis=1)
    if len(codes) < 2 or not (coders_per_unit >= 2).any():
        return None
    form = "full" if (coders_per_unit >= 3).sum() >= FULL_FORM_UNITS else "one-coin"
    result = dawid_skene(counts, form)
    posterior = pd.DataFrame(result.posterior, index=units, columns=[confidence_column(dimension, c) for c in codes])
    summary = {
        "form": form, "method": "Dawid & Skene (1979), EM", "codes": codes, "coders": coders,
        "units": int(len(units)), "units_with_two_or_more_coders": int((coders_per_unit >= 2).sum()),
        "prevalence": dict(zip(codes, result.prevalence.round(6).tolist())),
        "coder_accuracy": dict(zip(coders, np.einsum("k,jkk->j", result.prevalence, result.theta).round(6).tolist())),
        "iterations": result.iterations, "converged": result.converged,
        "log_likelihood": round(result.log_likelihood, 6),
    }
    return LabelConfidence(posterior=posterior, summary=summary)


def label_confidences(observations: pd.DataFrame, dimensions: list[str] | tuple[str, ...],
                      could_not_observe: dict[str, str]) -> tuple[pd.DataFrame, dict[str, list[str]], dict[str, dict | None]]:
    """Every dimension's fit: (posterior columns indexed by unit, columns per dimension, summary per
    dimension -- None where not fitted).  ``observations`` has ``unit``, ``coder`` and one column per dimension."""
    frames, columns, summaries = [], {}, {}
    for dimension in dimensions:
        fit = fit_label_confidence(observations, dimension, could_not_observe.get(dimension))
        summaries[dimension] = None if fit is None else fit.summary
        columns[dimension] = [] if fit is None else list(fit.posterior.columns)
        if fit is not None:
            frames.append(fit.posterior)
    posterior = pd.concat(frames, axis=1) if frames else pd.DataFrame(index=pd.Index([], name="unit"))
    return posterior, columns, summaries
