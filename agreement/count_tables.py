"""Per-cluster count tables of one dimension: everything every figure is computed from.

All coefficients in ``agreement.coefficients`` are functions of sums of these tables,
so a bootstrap resample of clusters (learners) is a weighted sum of the per-cluster
tables: one (resamples x clusters) @ (clusters x cells) matrix product.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse

from agreement.dimensions import Dimension, code_values


@dataclass(frozen=True)
class CountTables:
    """Counts of one dimension, one slice per cluster (learner).

    contingency  (clusters, k, k) first coder x second coder, summed over unordered
                 coder pairs (alphabetical) within each unit
    coincidence  (clusters, k, k) Krippendorff's coincidences
    fleiss_sum   (clusters,) sum over units of Fleiss' P_i
    fleiss_units (clusters,) units with two or more codes
    code_totals  (clusters, k) codes given in those units
    """

    codes: tuple[str, ...]
    values: np.ndarray
    coders: tuple[str, ...]
    units: int
    contingency: np.ndarray
    coincidence: np.ndarray
    fleiss_sum: np.ndarray
    fleiss_units: np.ndarray
    code_totals: np.ndarray

    @property
    def clusters(self) -> int:
        return self.contingency.shape[0]

    def flat(self) -> np.ndarray:
        """(clusters, cells): every table side by side, for the bootstrap product."""
        c = self.clusters
        square = len(self.codes) ** 2
        return np.hstack([
            self.contingency.reshape(c, square), self.coincidence.reshape(c, square),
            self.fleiss_sum[:, None], self.fleiss_units[:, None], self.code_totals,
        ])

    def unflat(self, flat: np.ndarray) -> dict[str, np.ndarray]:
        """The tables back from ``flat`` rows (any leading shape): the inverse of ``flat``."""
        k = len(self.codes)
        lead = flat.shape[:-1]
        square = k * k
        return {
            "contingency": flat[..., :square].reshape(lead + (k, k)),
            "coincidence": flat[..., square:2 * square].reshape(lead + (k, k)),
            "fleiss_sum": flat[..., 2 * square],
            "fleiss_units": flat[..., 2 * square + 1],
            "code_totals": flat[..., 2 * square + 2:],
        }


def count_tables(
    units: pd.DataFrame,
    dimension: Dimension,
    cluster_index: np.ndarray,
    clusters: int,
    include_could_not_observe: bool = False,
) -> CountTables:
    """Build the per-cluster tables of ``dimension`` from a UNITS table.

    ``cluster_index`` gives, for every row of ``units``, its cluster number in
    0..clusters-1 (the same numbering for every dimension, so resamples line up).
    Codes outside the compared codes (the could-not-observe code when excluded) count
    as missing.
    """
    codes = dimension.compared_codes(include_could_not_observe)
    k = len(codes)
    code_of = pd.Series(np.arange(k), index=pd.Index(codes, dtype=object))
    raw = units[dimension.name].astype(object)
    code_index = raw.map(code_of).fillna(-1).to_numpy(dtype=np.int64)
    keep = code_index >= 0
    unit_index, unit_names = pd.factorize(units["unit"].to_numpy()[keep])
    coder_index, coder_names = pd.factorize(units["coder"].to_numpy()[keep], sort=True)
    code_index = code_index[keep]
    row_cluster = np.asarray(cluster_index)[keep]
    n_units = len(unit_names)

    value_counts = np.bincount(unit_index * k + code_index, minlength=n_units * k).reshape(n_units, k).astype(float)
    per_unit = value_counts.sum(axis=1)
    pairable = per_unit >= 2
    unit_cluster = np.zeros(n_units, dtype=np.int64)
    unit_cluster[unit_index] = row_cluster
    to_cluster = sparse.csr_matrix(
        (pairable.astype(float), (unit_cluster, np.arange(n_units))), shape=(clusters, n_units)
    )

    # Krippendorff (2011): o_ck = sum_u (n_uc n_uk - [c == k] n_uc) / (m_u - 1)
    outer = value_counts[:, :, None] * value_counts[:, None, :]
    outer[:, np.arange(k), np.arange(k)] -= value_counts
    scale = np.where(pairable, 1.0 / np.maximum(per_unit - 1.0, 1.0), 0.0)
    coincidence = np.asarray(to_cluster @ (outer.reshape(n_units, k * k) * scale[:, None])).reshape(clusters, k, k)

    # Fleiss (1971): P_i = sum_j n_ij (n_ij - 1) / (m_i (m_i - 1))
    agreeing = (value_counts * (value_counts - 1.0)).sum(axis=1)
    share = np.where(pairable, agreeing / np.maximum(per_unit * (per_unit - 1.0), 1.0), 0.0)
    fleiss_sum = np.asarray(to_cluster @ share).ravel()
    fleiss_units = np.asarray(to_cluster @ np.ones(n_units)).ravel()
    code_totals = np.asarray(to_cluster @ value_counts)

    contingency = _pair_contingency(unit_index, coder_index, code_index, unit_cluster, n_units,
                                    len(coder_names), k, clusters)
    coders_with_pairs = tuple(str(name) for name in coder_names)
    return CountTables(
        codes=codes, values=code_values(codes), coders=coders_with_pairs, units=int(pairable.sum()),
        contingency=contingency, coincidence=coincidence, fleiss_sum=fleiss_sum,
        fleiss_units=fleiss_units, code_totals=code_totals,
    )


def _pair_contingency(unit_index: np.ndarray, coder_index: np.ndarray, code_index: np.ndarray,
                      unit_cluster: np.ndarray, n_units: int, n_coders: int, k: int,
                      clusters: int) -> np.ndarray:
    """Sum over unordered coder pairs (a < b) of one-hot(code_a) x one-hot(code_b), per cluster."""
    wide = np.full((n_units, max(n_coders, 1)), -1, dtype=np.int64)
    wide[unit_index, coder_index] = code_index
    counts = np.zeros(clusters * k * k, dtype=float)
    for first in range(n_coders):
        for second in range(first + 1, n_coders):
            both = (wide[:, first] >= 0) & (wide[:, second] >= 0)
            cell = unit_cluster[both] * k * k + wide[both, first] * k + wide[both, second]
            counts += np.bincount(cell, minlength=clusters * k * k)
    return counts.reshape(clusters, k, k)
