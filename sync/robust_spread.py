"""The robust standard deviation every clock fit uses: one home, scipy's estimator.

1.4826 x the median absolute deviation from the median is the SD of normal data, and one
wild value (a mark on the wrong event, a burst of log lines) does not move it.
"""
from __future__ import annotations

import numpy as np
from scipy.stats import median_abs_deviation


def robust_sd(values: np.ndarray) -> float:
    """scipy's normal-scaled median absolute deviation; 0.0 for no values (nothing spreads).

    scipy gives NaN on empty input; the fits treat "no residuals" as "no spread", so the
    empty case is kept as 0.0 here, where the decision is visible.
    """
    values = np.asarray(values, dtype=np.float64)
    return float(median_abs_deviation(values, scale="normal")) if len(values) else 0.0
