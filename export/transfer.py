"""Will the detector work at a site it has never seen?  Leave-one-group-out and the train-A / test-B matrix.

For an attribute (site, cohort ...) with groups of at least ``min_learners`` learners:
  leave one group out  train on every other eligible group, test on the held-out one;
  matrix (2 to 6 groups) train on group A, test on group B, for every A != B.
Beside each figure stands the held-out group's own grouped cross-validated figure
("within": ``folds`` folds of its learners, default ``WITHIN_FOLDS``), at a matched training size so that the drop is not
just less data: both the transfer fit and every within-group training fold use the same
number of learners, the smaller of the source's learners and the within-group training
fold's learners, drawn at random.  ``drop`` = within minus transfer.

Transfer fits use the setting the pooled nested search chose most often (hyperparameters
are not re-tuned per cell; both transfer and within figures use that setting, so the
drop compares like with like).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from export.nested_search import fit_setting, predict_codes
from export.out_of_fold import Score, grouped_folds, score
from export.subgroups import MIN_LEARNERS, MISSING_GROUP

MATRIX_GROUPS = (2, 6)
WITHIN_FOLDS = 3  # folds of the within-group figure (its training folds hold 2/3 of the group's learners)


def _figures(value: Score) -> dict:
    return {"kappa": value.kappa, "auc": value.auc}


def _drop(within: Score, transfer: Score) -> dict:
    return {key: None if getattr(within, key) is None or getattr(transfer, key) is None
            else getattr(within, key) - getattr(transfer, key) for key in ("kappa", "auc")}


class _Audit:
    """Shared state of one transfer audit: the data, the model, and the fits already made."""

    def __init__(self, features, labels, learners, names, model, setting, folds, seed, weights):
        self.features, self.labels, self.learners, self.names = features, labels, learners, names
        self.model, self.setting, self.folds, self.seed, self.weights = model, setting, folds, seed, weights
        self.codes = np.unique(labels.to_numpy())
        self.rng = np.random.default_rng(seed)
        self.within_cache: dict[tuple[str, int], Score] = {}
        self.cell_cache: dict[tuple[tuple[str, ...], str], dict] = {}
        self.folds_cache: dict[str, list[tuple[np.ndarray, np.ndarray]]] = {}

    def _draw(self, rows: np.ndarray, size: int) -> np.ndarray:
        """Rows of ``size`` learners drawn at random from ``rows``."""
        pool = np.unique(self.learners[rows])
        chosen = self.rng.choice(pool, size=min(size, len(pool)), replace=False)
        return rows[np.isin(self.learners[rows], chosen)]

    def _fit_predict(self, train: np.ndarray, test: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        weights = None if self.weights is None else self.weights[train]
        fitted = fit_setting(self.model, self.setting, self.features.iloc[train], self.labels.iloc[train],
                             self.seed, weights)
        return predict_codes(fitted, self.features.iloc[test], self.codes)

    def within_folds(self, group: str) -> list[tuple[np.ndarray, np.ndarray]]:
        if group not in self.folds_cache:
            rows = np.flatnonzero(self.names == group)
            local = grouped_folds(self.labels.iloc[rows], pd.Series(self.learners[rows]), self.folds, self.seed)
            self.folds_cache[group] = [(rows[train], rows[test]) for train, test in local]
        return self.folds_cache[group]

    def matched_size(self, source_rows: np.ndarray, group: str) -> int:
        fold_learners = min(len(np.unique(self.learners[train])) for train, _ in self.within_folds(group))
        return min(len(np.unique(self.learners[source_rows])), fold_learners)

    def within(self, group: str, size: int) -> Score:
        """Grouped CV inside ``group``, every training fold cut to ``size`` learners."""
        if (group, size) not in self.within_cache:
            rows = np.flatnonzero(self.names == group)
            predicted = np.empty(len(rows), dtype=object)
            probability = np.zeros((len(rows), len(self.codes)))
            position = pd.Series(np.arange(len(rows)), index=rows)
            for train, test in self.within_folds(group):
                where = position[test].to_numpy()
                predicted[where], probability[where] = self._fit_predict(self._draw(train, size), test)
            self.within_cache[(group, size)] = score(self.labels.iloc[rows].to_numpy(), self.codes, predicted, probability)
        return self.within_cache[(group, size)]

    def cell(self, source: list[str], target: str) -> dict:
        key = (tuple(source), target)  # with two groups, leaving one out is the matrix cell
        if key not in self.cell_cache:
            self.cell_cache[key] = self._cell(source, target)
        return self.cell_cache[key]

    def _cell(self, source: list[str], target: str) -> dict:
        source_rows = np.flatnonzero(np.isin(self.names, source))
        target_rows = np.flatnonzero(self.names == target)
        size = self.matched_size(source_rows, target)
        predicted, probability = self._fit_predict(self._draw(source_rows, size), target_rows)
        transfer = score(self.labels.iloc[target_rows].to_numpy(), self.codes, predicted, probability)
        within = self.within(target, size)
        return {"training_learners": int(size), "transfer": _figures(transfer), "within": _figures(within),
                "drop": _drop(within, transfer)}


def transfer_audit(
    features: pd.DataFrame, labels: pd.Series, learners: np.ndarray, values: pd.Series, model: str, setting: dict,
    folds: int = WITHIN_FOLDS, seed: int = 0, min_learners: int = MIN_LEARNERS, weights: np.ndarray | None = None,
) -> dict:
    """Keys: groups (eligible, sorted), too_small (groups left out), setting, leave_one_group_out
    [{group, training_learners, transfer, within, drop}], matrix [{train, test, ...}] or None
    (fewer than 2 or more than 6 groups).  Figures are {"kappa", "auc"}."""
    names = values.astype("string").fillna(MISSING_GROUP).to_numpy(dtype=object)
    per_group = pd.Series(learners).groupby(names).nunique()
    eligible = sorted(str(group) for group, count in per_group.items() if count >= min_learners)
    too_small = sorted(str(group) for group, count in per_group.items() if count < min_learners)
    result = {"groups": eligible, "too_small": too_small, "setting": setting, "leave_one_group_out": [], "matrix": None}
    if len(eligible) < 2:
        return result
    audit = _Audit(features, labels, learners, names, model, setting, folds, seed, weights)
    for group in eligible:
        others = [other for other in eligible if other != group]
        result["leave_one_group_out"].append({"group": group, **audit.cell(others, group)})
    if MATRIX_GROUPS[0] <= len(eligible) <= MATRIX_GROUPS[1]:
        result["matrix"] = [{"train": source, "test": target, **audit.cell([source], target)}
                            for source in eligible for target in eligible if source != target]
    return result
