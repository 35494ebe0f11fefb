"""The one robust SD of the clock fits against statsmodels' MAD (an outside reference)."""
from __future__ import annotations

import numpy as np
import pytest
from statsmodels.robust.scale import mad

from sync.robust_spread import robust_sd


def test_robust_sd_matches_statsmodels_mad_and_ignores_one_wild_value():
    values = np.random.default_rng(3).normal(0.0, 0.2, 200)
    # statsmodels.robust.scale.mad: median |x - median| / Phi^-1(3/4), the normal-consistent MAD
    assert robust_sd(values) == pytest.approx(float(mad(values)), rel=1e-9)
    assert robust_sd(np.append(values, 1e6)) == pytest.approx(robust_sd(values), rel=0.02)


def test_robust_sd_of_nothing_is_no_spread():
    assert robust_sd(np.array([])) == 0.0
