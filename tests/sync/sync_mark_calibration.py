"""How honest the sync-mark fit's standard errors are, over seeds of the planted study
(tests/sync/sync_planted_clock.py, its first day: 24 marks over 4 hours, reaction noise
0.2 s, two marks pressed 6-7 s late, PLANTED clock 37.4 s ahead, 45 ppm).

Per seed: the fitted line's largest error against the PLANTED clock over the day's
observed span, divided by ``span_standard_error_s``; and the error at the model's
reference divided by ``offset_standard_error_s``.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from sync.clock_marks import fit_from_marks
from tests.sync import sync_planted_clock as planted


def error_ratios(seeds: range) -> tuple[np.ndarray, np.ndarray]:
    """(span error / span SE, offset error / offset SE), one entry per seed."""
    span_ratio, offset_ratio = [], []
    for seed in seeds:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            built = planted.build(seed=seed, days=1)
        observed = built.observations
        span = np.array([observed["window_start"].min().value, observed["window_end"].max().value], dtype=np.int64)
        model = fit_from_marks(built.marks, built.events, (int(span[0]), int(span[1])))
        error = np.abs(model.to_log_ns(span) - planted.TRUTH.to_log_ns(span)).max() / 1e9
        reference = np.array([model.reference_ns], dtype=np.int64)
        at_reference = planted.TRUTH.to_device_ns(reference)[0] - reference[0]
        span_ratio.append(error / model.span_standard_error_s)
        offset_ratio.append(abs(at_reference / 1e9 - model.offset_s) / model.offset_standard_error_s)
    return np.array(span_ratio), np.array(offset_ratio)


def summary(span_ratio: np.ndarray, offset_ratio: np.ndarray) -> str:
    return (f"planted error within 2 span standard errors: {(span_ratio <= 2).mean():.1%} of {len(span_ratio)} seeds "
            f"(median error / span SE {np.median(span_ratio):.2f}); offset at the reference within 2 offset "
            f"standard errors: {(offset_ratio <= 2).mean():.1%} (median |error| / SE {np.median(offset_ratio):.2f})")
