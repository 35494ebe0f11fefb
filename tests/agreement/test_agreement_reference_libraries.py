"""Our figures against reference libraries on random data (hypothesis)."""
from __future__ import annotations

import warnings

import krippendorff
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import fleiss_kappa as statsmodels_fleiss_kappa

from agreement.count_tables import count_tables
from agreement.dimensions import Dimension
from agreement.statistics import assess_agreement, cluster_numbers, figures_from_tables

CODES = ("a", "b", "c", "d")


def long_units(matrix: np.ndarray, codes: tuple[str, ...]) -> pd.DataFrame:
    """UNITS table from a (coders x units) matrix of code indices, -1 = missing."""
    coders, count = matrix.shape
    rows = []
    for coder in range(coders):
        for unit in range(count):
            value = matrix[coder, unit]
            rows.append({"unit": f"u{unit:04d}", "coder": f"coder{coder}", "learner": f"L{unit % 7}",
                         "value": codes[value] if value >= 0 else None})
    return pd.DataFrame(rows).assign(value=lambda frame: frame["value"].astype("string"))


def figures_of(matrix: np.ndarray, level: str, codes: tuple[str, ...] = CODES):
    units = long_units(matrix, codes)
    result = assess_agreement(units, [Dimension("value", level, codes)], resamples=20, seed=3)
    return result.dimensions["value"]


two_coder_data = st.integers(min_value=2, max_value=60).flatmap(
    lambda n: st.lists(st.lists(st.integers(0, 3), min_size=n, max_size=n), min_size=2, max_size=2))


@settings(max_examples=25, deadline=None)
@given(two_coder_data)
def test_cohen_kappa_matches_scikit_learn(lists):
    # Reference: sklearn.metrics.cohen_kappa_score, weights None / "linear" / "quadratic".
    matrix = np.array(lists)
    result = figures_of(matrix, "ordinal")
    first, second = matrix
    labels = list(range(len(CODES)))
    for key, weights in (("cohen_kappa", None), ("cohen_kappa_linear", "linear"),
                         ("cohen_kappa_quadratic", "quadratic")):
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            expected = cohen_kappa_score(first, second, labels=labels, weights=weights)
        ours = result.figures[key].value
        if np.isfinite(expected):
            assert ours == pytest.approx(expected, abs=1e-9)
        else:
            assert ours is None


@settings(max_examples=25, deadline=None)
@given(two_coder_data)
def test_per_code_kappa_matches_scikit_learn_on_binarised_codes(lists):
    # Reference: sklearn cohen_kappa_score of "this code" vs "any other code".
    matrix = np.array(lists)
    result = figures_of(matrix, "nominal")
    for index, code in enumerate(CODES):
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            expected = cohen_kappa_score(matrix[0] == index, matrix[1] == index, labels=[False, True])
        ours = result.per_code_kappa[code].value
        if np.isfinite(expected):
            assert ours == pytest.approx(expected, abs=1e-9)
        else:
            assert ours is None


many_coder_data = st.tuples(st.integers(2, 6), st.integers(2, 40)).flatmap(
    lambda shape: st.lists(st.lists(st.integers(0, 3), min_size=shape[1], max_size=shape[1]),
                           min_size=shape[0], max_size=shape[0]))


@settings(max_examples=25, deadline=None)
@given(many_coder_data)
def test_fleiss_kappa_matches_statsmodels(lists):
    # Reference: statsmodels.stats.inter_rater.fleiss_kappa (method "fleiss") on the
    # subjects x categories count table; every unit coded by every coder.
    matrix = np.array(lists)
    counts = np.stack([(matrix == code).sum(axis=0) for code in range(len(CODES))], axis=1)
    with np.errstate(all="ignore"):
        expected = statsmodels_fleiss_kappa(counts, method="fleiss")
    ours = figures_of(matrix, "nominal").figures["fleiss_kappa"].value
    if np.isfinite(expected):
        assert ours == pytest.approx(expected, abs=1e-9)
    else:
        assert ours is None


missing_data = st.tuples(st.integers(2, 5), st.integers(2, 30)).flatmap(
    lambda shape: st.lists(st.lists(st.integers(-1, 3), min_size=shape[1], max_size=shape[1]),
                           min_size=shape[0], max_size=shape[0]))


@settings(max_examples=40, deadline=None)
@given(missing_data, st.sampled_from(["nominal", "ordinal", "interval", "ratio"]))
def test_alpha_from_coincidence_matrices_matches_krippendorff_package(lists, level):
    # Reference: krippendorff.alpha (PyPI "krippendorff"), values 1..4, NaN = missing.
    # Checked: our matrix route (what every bootstrap resample uses), not the point
    # value (which the package itself supplies).
    matrix = np.array(lists)
    codes = ("1", "2", "3", "4")
    dimension = Dimension("value", "ratio", codes)
    reliability = np.where(matrix >= 0, matrix + 1, np.nan).astype(float)
    units = long_units(matrix, codes)
    cluster_index, clusters = cluster_numbers(units)
    tables = count_tables(units, dimension, cluster_index, clusters)
    figures, _ = figures_from_tables(tables.unflat(tables.flat().sum(axis=0)), tables.values, dimension, False)
    ours = float(figures[f"alpha_{level}"])
    pairable_units = np.isfinite(reliability).sum(axis=0) >= 2
    pairable_values = np.unique(reliability[:, pairable_units][np.isfinite(reliability[:, pairable_units])])
    if len(pairable_values) < 2:
        # Nothing pairable, or one value only: the package raises or divides by zero; ours is undefined.
        assert np.isnan(ours)
        assert figures_of(matrix, level, codes).figures["alpha"].value is None
        return
    with np.errstate(all="ignore"):
        expected = krippendorff.alpha(reliability, level_of_measurement=level, value_domain=[1.0, 2.0, 3.0, 4.0])
    assert ours == pytest.approx(expected, abs=1e-9)
