"""Does the detector work as well for every group of learners?  Per-group figures with intervals.

The pooled out-of-fold predictions of the check (every window predicted by a model that
never saw its learner) are split by a roster attribute carried into the export (site,
cohort ...).  Per group: its size in learners and windows, the base rate of each code,
the detector's Cohen's kappa, AUC (one-vs-rest macro; the second code's AUC with two
codes) and recall per code, each with a 95 % learner-cluster bootstrap interval (expanded
for few learners)
(export/cluster_bootstrap.py), the difference from the rest of the learners (group
minus rest; learners resampled within the group and within the rest independently) with
its interval, the majority and stratified baselines' kappa and AUC on the same windows,
and the coders' agreement in the group (share of windows coded by two or more coders on
which all gave the same code) where the file says how each label was reached.

A group with fewer than ``min_learners`` learners is listed with its sizes and
``too_small: true`` and no figures: an interval from three learners says little.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from export.cluster_bootstrap import DEFAULT_RESAMPLES, LearnerTables, cluster_weights, learner_tables, percentile_interval
from sync.json_numbers import finite_or_none

MIN_LEARNERS = 5
MISSING_GROUP = "(missing)"


def estimate(point: float, resampled: np.ndarray, clusters: int | None = None) -> dict:
    """{"value", "low", "high"}; all None when the point is undefined.  ``clusters``: learners
    resampled (the smaller side for a difference), for the expanded interval."""
    if not np.isfinite(point):
        return {"value": None, "low": None, "high": None}
    low, high = percentile_interval(resampled, clusters)
    return {"value": float(point), "low": low, "high": high}


def _point(tables: LearnerTables, members: np.ndarray) -> dict[str, np.ndarray]:
    return tables.figures(members, np.ones((1, len(members))))


def group_figures(
    values: pd.Series | np.ndarray, learner: np.ndarray, truth: np.ndarray, codes: np.ndarray,
    model: tuple[np.ndarray, np.ndarray], baselines: dict[str, tuple[np.ndarray, np.ndarray]],
    multi_coded: np.ndarray | None = None, agreed: np.ndarray | None = None, min_learners: int = MIN_LEARNERS,
    resamples: int = DEFAULT_RESAMPLES, seed: int = 0,
) -> list[dict]:
    """One entry per group of ``values`` (the attribute per row); ``model`` and each baseline are
    (predicted code, probability per code) per row; ``multi_coded``/``agreed`` 0/1 per row or None.

    The bootstrap's clusters are (group, learner): a roster attribute nests learners in groups;
    for a per-window grouping (how the label was reached) a learner's windows in each group
    form their own cluster.

    Keys: group, learners, windows, too_small, base_rates, kappa, auc, recall (per code),
    difference_from_rest {kappa, auc}, majority_baseline {kappa, auc}, stratified_baseline
    {kappa, auc}, coder_agreement (or None).  Estimates are {"value", "low", "high"}.
    """
    names = pd.Series(values).astype("string").fillna(MISSING_GROUP).to_numpy(dtype=object)
    cluster, keys = pd.factorize(pd.Series(names, dtype=object) + "\x1f" + pd.Series(learner).astype(str))
    clusters = len(keys)
    cluster_group = np.empty(clusters, dtype=object)
    cluster_group[cluster] = names
    tables = learner_tables(truth, codes, *model, cluster, clusters, multi_coded, agreed)
    baseline_tables = {name: learner_tables(truth, codes, *pair, cluster, clusters) for name, pair in baselines.items()}
    groups = sorted(np.unique(names))
    streams = np.random.SeedSequence(seed).spawn(2 * len(groups))
    entries = []
    for number, group in enumerate(groups):
        rows = names == group
        members = np.flatnonzero(cluster_group == group)
        rest = np.flatnonzero(cluster_group != group)
        counts = pd.Series(truth[rows]).value_counts()
        entry = {"group": str(group), "learners": int(len(members)), "windows": int(rows.sum()),
                 "too_small": bool(len(members) < min_learners),
                 "base_rates": {str(code): float(counts.get(code, 0) / rows.sum()) for code in codes}}
        if entry["too_small"]:
            entries.append(entry)
            continue
        own = tables.figures(members, cluster_weights(len(members), resamples, np.random.default_rng(streams[2 * number])))
        point = _point(tables, members)
        size = len(members)
        entry["kappa"] = estimate(point["kappa"][0], own["kappa"], size)
        entry["auc"] = estimate(point["auc"][0], own["auc"], size)
        entry["recall"] = {str(code): estimate(point["recall"][0, index], own["recall"][:, index], size)
                           for index, code in enumerate(codes)}
        entry["difference_from_rest"] = None
        if len(rest):
            other = tables.figures(rest, cluster_weights(len(rest), resamples, np.random.default_rng(streams[2 * number + 1])))
            rest_point = _point(tables, rest)
            entry["difference_from_rest"] = {
                key: estimate(point[key][0] - rest_point[key][0], own[key] - other[key], min(size, len(rest)))
                for key in ("kappa", "auc")}
        for name, baseline in baseline_tables.items():
            figures = _point(baseline, members)
            entry[f"{name}_baseline"] = {key: finite_or_none(figures[key][0]) for key in ("kappa", "auc")}
        known = tables.multi_coded[members].sum()
        entry["coder_agreement"] = (
            {**estimate(point["agreement"][0], own["agreement"], size), "windows": int(known)} if known > 0 else None)
        entries.append(entry)
    return entries
