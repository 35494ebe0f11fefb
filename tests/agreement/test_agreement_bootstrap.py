"""Cluster-bootstrap intervals: right resamples, cover the point, wider than unit resampling."""
from __future__ import annotations

import krippendorff
import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from agreement.bootstrap import cluster_weights
from agreement.count_tables import count_tables
from agreement.dimensions import Dimension
from agreement.statistics import assess_agreement, cluster_numbers, figures_from_tables

CODES = ("on_task", "off_task", "away")
ACTIVITY = Dimension("activity", "nominal", CODES)


def clustered_units(learners: int = 30, per_learner: int = 20, seed: int = 5) -> pd.DataFrame:
    """Two coders; each learner is either easy (coders always agree) or hard (coders guess).

    Agreement is then strongly correlated within a learner: the case the cluster
    bootstrap exists for.
    """
    generator = np.random.default_rng(seed)
    rows = []
    for learner in range(learners):
        easy = learner % 2 == 0
        for window in range(per_learner):
            truth = generator.integers(0, 3)
            second = truth if easy else generator.integers(0, 3)
            unit = f"L{learner:02d}-{window:02d}"
            rows.append({"unit": unit, "coder": "ann", "learner": f"L{learner:02d}", "activity": CODES[truth]})
            rows.append({"unit": unit, "coder": "ben", "learner": f"L{learner:02d}", "activity": CODES[second]})
    return pd.DataFrame(rows).assign(activity=lambda frame: frame["activity"].astype("string"))


def test_resampled_tables_equal_explicit_resamples_scored_by_reference_libraries():
    # Reference: krippendorff.alpha and sklearn cohen_kappa_score on the units of each
    # resample written out explicitly (clusters repeated as often as drawn).
    units = clustered_units(learners=8, per_learner=6)
    cluster_index, clusters = cluster_numbers(units)
    weights = cluster_weights(clusters, resamples=5, seed=11)
    tables = count_tables(units, ACTIVITY, cluster_index, clusters)
    resampled, _ = figures_from_tables(tables.unflat(weights @ tables.flat()), tables.values, ACTIVITY, True)
    learners = sorted(units["learner"].unique())
    wide = units.pivot(index="unit", columns="coder", values="activity")
    wide["learner"] = units.drop_duplicates("unit").set_index("unit")["learner"]
    for row, draw in enumerate(weights.astype(int)):
        parts = [wide[wide["learner"] == learner] for learner, times in zip(learners, draw) for _ in range(times)]
        sample = pd.concat(parts)
        codes = sample[["ann", "ben"]].apply(lambda column: column.map({c: i for i, c in enumerate(CODES)}))
        alpha = krippendorff.alpha(codes.to_numpy(dtype=float).T, level_of_measurement="nominal",
                                   value_domain=[0.0, 1.0, 2.0])
        kappa = cohen_kappa_score(codes["ann"], codes["ben"], labels=[0, 1, 2])
        assert resampled["alpha_nominal"][row] == pytest.approx(alpha, abs=1e-9)
        assert resampled["cohen_kappa"][row] == pytest.approx(kappa, abs=1e-9)


def test_interval_covers_point_for_every_defined_figure():
    units = clustered_units()
    result = assess_agreement(units, [ACTIVITY], resamples=1000, seed=2).dimensions["activity"]
    for key, estimate in result.figures.items():
        if estimate.value is not None:
            assert estimate.low <= estimate.value <= estimate.high, key


def test_cluster_bootstrap_is_wider_than_unit_bootstrap_on_clustered_data():
    # Statistical fact (e.g. Field & Welsh 2007, "Bootstrapping clustered data"): with
    # positive within-cluster correlation, resampling single units understates variance.
    units = clustered_units()
    by_learner = assess_agreement(units, [ACTIVITY], resamples=1000, seed=2).dimensions["activity"]
    by_unit = assess_agreement(units, [ACTIVITY], resamples=1000, seed=2,
                               cluster_column="unit").dimensions["activity"]
    for key in ("cohen_kappa", "alpha_nominal", "percent_agreement"):
        cluster_width = by_learner.figures[key].high - by_learner.figures[key].low
        unit_width = by_unit.figures[key].high - by_unit.figures[key].low
        assert cluster_width > 1.5 * unit_width, key
    assert by_learner.figures["cohen_kappa"].value == by_unit.figures["cohen_kappa"].value


def test_same_seed_same_interval_and_other_seed_differs():
    units = clustered_units()
    first = assess_agreement(units, [ACTIVITY], resamples=300, seed=4).dimensions["activity"]
    again = assess_agreement(units, [ACTIVITY], resamples=300, seed=4).dimensions["activity"]
    other = assess_agreement(units, [ACTIVITY], resamples=300, seed=5).dimensions["activity"]
    assert first.figures["alpha"] == again.figures["alpha"]
    assert first.figures["alpha"].low != other.figures["alpha"].low
