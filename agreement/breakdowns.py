"""Views of agreement: per coder pair, per session, over time, and coder certification."""
from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd

from agreement import coefficients
from agreement.count_tables import count_tables
from agreement.dimensions import Dimension
from agreement.statistics import Agreement, Estimate, assess_agreement
from agreement.tables import ROLLING_COLUMNS

# Common practice: kappa of at least 0.6 (Landis & Koch's "substantial" starts above
# it) on at least 50 paired observations before a coder's codes are used.
CERTIFICATION_KAPPA = 0.6
CERTIFICATION_PAIRS = 50
ROLLING_WINDOW = 50


def units_of_coders(units: pd.DataFrame, coders: tuple[str, ...]) -> pd.DataFrame:
    """Rows of the given coders in units that at least two of them coded."""
    rows = units[units["coder"].isin(coders)]
    shared = rows.groupby("unit")["coder"].transform("nunique") >= 2
    return rows[shared]


def by_pair(units: pd.DataFrame, dimensions: list[Dimension], resamples: int, seed: int,
            include_could_not_observe: bool = False) -> dict[tuple[str, str], Agreement]:
    """Figures for every pair of coders, over the units both coded."""
    coders = sorted(units["coder"].astype(str).unique())
    results = {}
    for pair in combinations(coders, 2):
        rows = units_of_coders(units, pair)
        if len(rows):
            results[pair] = assess_agreement(rows, dimensions, resamples, seed, include_could_not_observe)
    return results


def session_of_units(units: pd.DataFrame) -> pd.Series:
    """Per row, the unit's session key: its rows' session ids, sorted and joined by "+"."""
    joined = units.groupby("unit")["session_id"].agg(lambda ids: "+".join(sorted(set(map(str, ids)) - {""})))
    return units["unit"].map(joined)


def by_session(units: pd.DataFrame, dimensions: list[Dimension], resamples: int, seed: int,
               include_could_not_observe: bool = False) -> dict[str, Agreement]:
    """Figures for every (paired) coding session."""
    sessions = session_of_units(units)
    return {
        str(session): assess_agreement(units[sessions == session], dimensions, resamples, seed,
                                       include_could_not_observe)
        for session in sorted(sessions.unique())
    }


def rolling_kappa(units: pd.DataFrame, dimension: Dimension, window: int = ROLLING_WINDOW,
                  include_could_not_observe: bool = False) -> pd.DataFrame:
    """Kappa over each run of ``window`` consecutive units (in time order), to catch drift.

    Returns ROLLING (agreement/tables.py): position (1-based number of the window's last
    unit), time (of that unit), units, kappa (Cohen's kappa on the pooled coder pairs).
    """
    first_time = units.groupby("unit", sort=False)["time"].min()
    order = pd.Series(np.arange(len(first_time)), index=first_time.index)
    order = order.loc[first_time.sort_values(kind="stable").index]
    position = pd.Series(np.arange(len(order)), index=order.index)
    cluster_index = units["unit"].map(position).to_numpy()
    tables = count_tables(units, dimension, cluster_index, len(position), include_could_not_observe)
    contingency = tables.contingency
    paired = contingency.sum(axis=(1, 2)) > 0
    contingency = contingency[paired]
    times = first_time.loc[order.index].to_numpy()[paired]
    if len(contingency) == 0:
        return pd.DataFrame({column: [] for column in ROLLING_COLUMNS})
    size = min(window, len(contingency))
    running = np.cumsum(contingency, axis=0)
    windows = running[size - 1:] - np.concatenate([np.zeros((1,) + running.shape[1:]), running[:-size]])
    k = contingency.shape[-1]
    with np.errstate(all="ignore"):
        kappa = coefficients.kappa_from_contingency(windows, coefficients.disagreement_weights(k, "none"))
    return pd.DataFrame({"position": np.arange(size, len(contingency) + 1), "time": times[size - 1:],
                         "units": size, "kappa": kappa})


@dataclass(frozen=True)
class Certification:
    """One coder against the reference coder on one dimension."""

    coder: str
    dimension: str
    pairs: int
    kappa: Estimate
    passes: bool


def certify(units: pd.DataFrame, dimensions: list[Dimension], reference: str, resamples: int, seed: int,
            minimum_kappa: float = CERTIFICATION_KAPPA, minimum_pairs: int = CERTIFICATION_PAIRS,
            include_could_not_observe: bool = False) -> dict[str, list[Certification]]:
    """Per coder: passes on a dimension when Cohen's kappa with ``reference`` is at least
    ``minimum_kappa`` on at least ``minimum_pairs`` pairs; certified when every dimension passes."""
    results: dict[str, list[Certification]] = {}
    for coder in sorted(set(units["coder"].astype(str)) - {reference}):
        rows = units_of_coders(units, (reference, coder))
        agreement = assess_agreement(rows, dimensions, resamples, seed, include_could_not_observe) if len(rows) else None
        checks = []
        for dimension in dimensions:
            result = agreement.dimensions[dimension.name] if agreement else None
            kappa = result.figures["cohen_kappa"] if result else Estimate(None, None, None)
            pairs = result.units if result else 0
            passes = kappa.value is not None and kappa.value >= minimum_kappa and pairs >= minimum_pairs
            checks.append(Certification(coder, dimension.name, pairs, kappa, passes))
        results[coder] = checks
    return results
