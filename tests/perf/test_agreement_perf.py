"""Benchmark: 1000 cluster-bootstrap resamples of Krippendorff's alpha over 10k units.

Ours: per-learner coincidence matrices once, a (resamples x learners) multinomial
weight matrix, one matrix product, alpha from the matrices in numpy.
Obvious alternative: call the krippendorff package once per resample on that
resample's units.  Run: FIELDMARK_PERF=1 pytest tests/perf/test_agreement_perf.py -s
"""
from __future__ import annotations

import time

import krippendorff
import numpy as np
import pandas as pd
import pytest

from agreement.bootstrap import cluster_weights
from agreement.count_tables import count_tables
from agreement.dimensions import Dimension
from agreement.statistics import assess_agreement, cluster_numbers, figures_from_tables

UNITS = 10_000
LEARNERS = 200
RESAMPLES = 1000
CODES = ("on_task", "task_discussion", "off_task", "rapid_guessing", "away")
ACTIVITY = Dimension("activity", "nominal", CODES)


def synthetic_units(seed: int = 1) -> pd.DataFrame:
    generator = np.random.default_rng(seed)
    truth = generator.integers(0, 5, UNITS)
    second = np.where(generator.random(UNITS) < 0.8, truth, generator.integers(0, 5, UNITS))
    second = np.where(generator.random(UNITS) < 0.03, -1, second)  # some missing codes
    learner = np.array([f"L{n:03d}" for n in generator.integers(0, LEARNERS, UNITS)])
    unit = np.array([f"u{n:05d}" for n in range(UNITS)])
    names = np.array(CODES + (None,), dtype=object)
    frame = pd.DataFrame({
        "unit": np.concatenate([unit, unit]), "coder": ["ann"] * UNITS + ["ben"] * UNITS,
        "learner": np.concatenate([learner, learner]), "activity": names[np.concatenate([truth, second])],
    })
    return frame.assign(activity=frame["activity"].astype("string"))


@pytest.mark.perf
def test_alpha_bootstrap_speed_against_looping_the_krippendorff_package():
    units = synthetic_units()
    started = time.perf_counter()
    cluster_index, clusters = cluster_numbers(units)
    weights = cluster_weights(clusters, RESAMPLES, seed=1)
    tables = count_tables(units, ACTIVITY, cluster_index, clusters)
    resampled, _ = figures_from_tables(tables.unflat(weights @ tables.flat()), tables.values, ACTIVITY, True)
    ours = resampled["alpha_nominal"]
    ours_seconds = time.perf_counter() - started

    started = time.perf_counter()
    full = assess_agreement(units, [ACTIVITY], resamples=RESAMPLES, seed=1)
    full_seconds = time.perf_counter() - started

    # The alternative: per resample, the units of the drawn learners (repeated as drawn)
    # as a value-count matrix, scored by krippendorff.alpha.
    wide = units.pivot(index="unit", columns="coder", values="activity")
    learner_of_unit = units.drop_duplicates("unit").set_index("unit")["learner"].reindex(wide.index)
    learner_number = pd.Index(sorted(learner_of_unit.unique())).get_indexer(learner_of_unit)
    value_counts = np.stack([(wide == code).sum(axis=1).to_numpy() for code in CODES], axis=1)
    units_of_learner = [np.flatnonzero(learner_number == n) for n in range(clusters)]
    started = time.perf_counter()
    reference = np.empty(RESAMPLES)
    for row, draw in enumerate(weights.astype(int)):
        chosen = np.concatenate([np.repeat(units_of_learner[n], times) for n, times in enumerate(draw) if times])
        reference[row] = krippendorff.alpha(value_counts=value_counts[chosen], level_of_measurement="nominal")
    reference_seconds = time.perf_counter() - started

    np.testing.assert_allclose(ours, reference, atol=1e-9)
    ratio = reference_seconds / ours_seconds
    print(f"\n{RESAMPLES} resamples of alpha over {UNITS} units, {LEARNERS} learners:"
          f"\n  matrix bootstrap (alpha only)         {ours_seconds:8.3f} s"
          f"\n  assess_agreement (every figure + CI)  {full_seconds:8.3f} s"
          f"\n  krippendorff package in a loop        {reference_seconds:8.3f} s"
          f"\n  ratio loop / ours                     {ratio:8.1f} x")
    assert ours_seconds <= 1.0
    assert full_seconds <= 1.0
    assert full.dimensions["activity"].figures["alpha"].low is not None
