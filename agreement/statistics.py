"""Every agreement figure of every dimension, each with its cluster-bootstrap interval.

``assess_agreement`` is the library's front door: UNITS table (agreement/tables.py)
in, ``Agreement`` (dataclasses) out.  Point values and resamples go through the same
table-based code (``agreement.coefficients``), so a CI always describes its figure.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from agreement import coefficients
from agreement.bootstrap import CONFIDENCE, cluster_weights, percentile_intervals
from agreement.count_tables import CountTables, count_tables
from agreement.dimensions import Dimension
from agreement.tables import FIGURE_KEYS
from sync.json_numbers import finite_or_none


@dataclass(frozen=True)
class Estimate:
    """A figure and its 95 % interval; all None when the figure is undefined."""

    value: float | None
    low: float | None
    high: float | None

    def as_dict(self) -> dict[str, float | None]:
        return {"value": self.value, "low": self.low, "high": self.high}


@dataclass(frozen=True)
class Confusion:
    """Rows: the first coder's codes, columns: the second coder's (pooled over coder pairs)."""

    rows: str
    columns: str
    codes: tuple[str, ...]
    counts: np.ndarray


@dataclass(frozen=True)
class CouldNotObserve:
    """How often the could-not-observe code was used (reported apart from the figures)."""

    code: str | None
    included: bool
    codes: int
    units_one_coder_could_not: int


@dataclass(frozen=True)
class DimensionAgreement:
    """All figures of one dimension (keys of ``figures``: agreement.tables.FIGURE_KEYS)."""

    name: str
    level: str
    codes: tuple[str, ...]
    units: int
    coders: tuple[str, ...]
    figures: dict[str, Estimate]
    band: str
    per_code_kappa: dict[str, Estimate]
    confusion: Confusion
    could_not_observe: CouldNotObserve


@dataclass(frozen=True)
class Agreement:
    """Figures of every dimension plus what they were computed over."""

    dimensions: dict[str, DimensionAgreement]
    coders: tuple[str, ...]
    units: int
    clusters: int
    resamples: int
    seed: int
    confidence: float = CONFIDENCE


def figures_from_tables(tables: dict[str, np.ndarray], values: np.ndarray, dimension: Dimension,
                        two_coders: bool) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Every figure from (possibly batched) tables: ({figure key: array}, per-code (..., k))."""
    contingency = tables["contingency"]
    k = contingency.shape[-1]
    lead = contingency.shape[:-2]
    undefined = np.full(lead, np.nan)
    with np.errstate(all="ignore"):
        pooled_kappa = coefficients.kappa_from_contingency(contingency, coefficients.disagreement_weights(k, "none"))
        figures = {
            "percent_agreement": np.where(tables["fleiss_units"] > 0,
                                          tables["fleiss_sum"] / np.maximum(tables["fleiss_units"], 1), np.nan),
            "cohen_kappa": pooled_kappa if two_coders else undefined,
            "cohen_kappa_linear": undefined,
            "cohen_kappa_quadratic": undefined,
            "fleiss_kappa": coefficients.fleiss_kappa(tables["fleiss_sum"], tables["fleiss_units"],
                                                      tables["code_totals"]),
            "pabak": coefficients.pabak(contingency),
            "max_kappa": coefficients.max_kappa(contingency),
        }
        if two_coders and dimension.is_ordered():
            for weighting in ("linear", "quadratic"):
                figures[f"cohen_kappa_{weighting}"] = coefficients.kappa_from_contingency(
                    contingency, coefficients.disagreement_weights(k, weighting))
        for level in ("nominal", "ordinal", "interval", "ratio"):
            figures[f"alpha_{level}"] = (
                coefficients.alpha_from_coincidence(tables["coincidence"], values, level)
                if level in dimension.levels_reported() else undefined
            )
        figures["alpha"] = figures[f"alpha_{dimension.level}"]
        per_code = coefficients.per_code_kappa(contingency)
    return {key: figures[key] for key in FIGURE_KEYS}, per_code


def _could_not_observe(units: pd.DataFrame, dimension: Dimension, included: bool) -> CouldNotObserve:
    code = dimension.could_not_observe
    if code is None:
        return CouldNotObserve(code=None, included=included, codes=0, units_one_coder_could_not=0)
    column = units[dimension.name].astype(object)
    is_code = column.eq(code).fillna(False).to_numpy(dtype=bool)
    is_other = (column.notna() & column.ne(code)).fillna(False).to_numpy(dtype=bool)
    per_unit = pd.DataFrame({"unit": units["unit"].to_numpy(), "could_not": is_code, "other": is_other})
    by_unit = per_unit.groupby("unit", sort=False)[["could_not", "other"]].any()
    mixed = int((by_unit["could_not"] & by_unit["other"]).sum())
    return CouldNotObserve(code=code, included=included, codes=int(is_code.sum()), units_one_coder_could_not=mixed)


def estimate_text(estimate: Estimate) -> str:
    """"0.712 [0.601, 0.803]", or "undefined"."""
    if estimate.value is None:
        return "undefined"
    if estimate.low is None:
        return f"{estimate.value:.3f}"
    return f"{estimate.value:.3f} [{estimate.low:.3f}, {estimate.high:.3f}]"


def headline_kappa(figures: dict[str, Estimate]) -> Estimate:
    """Cohen's kappa for two coders, else Fleiss' kappa: the kappa the band labels."""
    cohen = figures["cohen_kappa"]
    return cohen if cohen.value is not None else figures["fleiss_kappa"]


def assess_dimension(units: pd.DataFrame, dimension: Dimension, cluster_index: np.ndarray, clusters: int,
                     weights: np.ndarray, include_could_not_observe: bool = False) -> DimensionAgreement:
    """Figures of one dimension with intervals from the given (resamples, clusters) weights."""
    counted: CountTables = count_tables(units, dimension, cluster_index, clusters, include_could_not_observe)
    two_coders = len(counted.coders) == 2
    flat = counted.flat()
    points, per_code = figures_from_tables(counted.unflat(flat.sum(axis=0)), counted.values, dimension, two_coders)
    resampled, per_code_resampled = figures_from_tables(counted.unflat(weights @ flat), counted.values,
                                                        dimension, two_coders)
    point_vector = np.array([points[key] for key in FIGURE_KEYS] + list(per_code), dtype=float)
    resample_matrix = np.column_stack([resampled[key] for key in FIGURE_KEYS] + [per_code_resampled])
    low, high = percentile_intervals(point_vector, resample_matrix)
    estimates = [Estimate(finite_or_none(v), finite_or_none(lo), finite_or_none(hi)) for v, lo, hi in zip(point_vector, low, high)]
    figures = dict(zip(FIGURE_KEYS, estimates[: len(FIGURE_KEYS)]))
    per_code_estimates = dict(zip(counted.codes, estimates[len(FIGURE_KEYS):]))
    rows, columns = (counted.coders[0], counted.coders[1]) if two_coders else ("first coder", "second coder")
    headline = headline_kappa(figures)
    return DimensionAgreement(
        name=dimension.name, level=dimension.level, codes=counted.codes, units=counted.units,
        coders=counted.coders, figures=figures, band=coefficients.landis_koch_band(headline.value),
        per_code_kappa=per_code_estimates,
        confusion=Confusion(rows=rows, columns=columns, codes=counted.codes,
                            counts=counted.contingency.sum(axis=0)),
        could_not_observe=_could_not_observe(units, dimension, include_could_not_observe),
    )


def cluster_numbers(units: pd.DataFrame, cluster_column: str = "learner") -> tuple[np.ndarray, int]:
    """Cluster number of every row (0..n-1) and n; one numbering shared by all dimensions."""
    index, names = pd.factorize(units[cluster_column].astype(str).to_numpy(), sort=True)
    return index, len(names)


def assess_agreement(units: pd.DataFrame, dimensions: list[Dimension], resamples: int = 1000, seed: int = 1,
                     include_could_not_observe: bool = False, cluster_column: str = "learner") -> Agreement:
    """Every figure of every dimension with 95 % intervals resampling ``cluster_column``.

    ``units`` is a UNITS table (agreement/tables.py).  Pass ``cluster_column="unit"``
    for an ordinary bootstrap over units (for comparison only).
    """
    cluster_index, clusters = cluster_numbers(units, cluster_column)
    weights = cluster_weights(clusters, resamples, seed)
    results = {
        dimension.name: assess_dimension(units, dimension, cluster_index, clusters, weights,
                                         include_could_not_observe)
        for dimension in dimensions
    }
    coders = tuple(sorted(units["coder"].astype(str).unique()))
    return Agreement(dimensions=results, coders=coders, units=int(units["unit"].nunique()),
                     clusters=clusters, resamples=resamples, seed=seed)


def dimension_json(result: DimensionAgreement) -> dict[str, object]:
    """One entry of the --json "dimensions" object; keys: agreement.tables.JSON_DIMENSION_KEYS."""
    entry: dict[str, object] = {"level": result.level, "codes": list(result.codes), "units": result.units,
                                "coders": list(result.coders)}
    entry.update({key: result.figures[key].as_dict() for key in FIGURE_KEYS})
    entry["band"] = result.band
    entry["per_code_kappa"] = {code: estimate.as_dict() for code, estimate in result.per_code_kappa.items()}
    entry["confusion"] = {"rows": result.confusion.rows, "columns": result.confusion.columns,
                          "codes": list(result.confusion.codes),
                          "counts": result.confusion.counts.round(6).tolist()}
    entry["could_not_observe"] = {"code": result.could_not_observe.code,
                                  "included": result.could_not_observe.included,
                                  "codes": result.could_not_observe.codes,
                                  "units_one_coder_could_not": result.could_not_observe.units_one_coder_could_not}
    return entry


def agreement_json(agreement: Agreement) -> dict[str, object]:
    """The per-dimension part of the --json object."""
    return {name: dimension_json(result) for name, result in agreement.dimensions.items()}
