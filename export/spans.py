"""Which stretch of the learner's log each window's features cover (the feature span).

sync/ puts the observed window on the log's clock; the data scientist may want features
over a different stretch around it (for example the minute before the code was entered).
The rule is in export/tables.py ("FEATURE SPAN").
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from export.tables import ANCHORS

NS_PER_SECOND = 1_000_000_000


@dataclass(frozen=True)
class SpanSettings:
    """Anchor and extents; ``None`` extents mean "the observed window itself"."""

    anchor: str = "start"
    before_s: float | None = None
    after_s: float | None = None

    def __post_init__(self) -> None:
        if self.anchor not in ANCHORS:
            raise ValueError(f"anchor must be one of {ANCHORS}, not {self.anchor!r}")


def feature_spans(windows: pd.DataFrame, settings: SpanSettings) -> tuple[np.ndarray, np.ndarray]:
    """(span start ns inclusive, span end ns exclusive) per window, int64 arrays.

    ``windows`` needs start_ns, end_ns and (for anchor "coded") coded_ns.
    """
    start = windows["start_ns"].to_numpy(dtype=np.int64)
    end = windows["end_ns"].to_numpy(dtype=np.int64)
    length = end - start
    if settings.anchor == "start":
        anchor = start
        before = np.zeros_like(start) if settings.before_s is None else _ns(settings.before_s)
        after = length if settings.after_s is None else _ns(settings.after_s)
    else:
        anchor = windows["coded_ns"].to_numpy(dtype=np.int64)
        before = length if settings.before_s is None else _ns(settings.before_s)
        after = np.zeros_like(start) if settings.after_s is None else _ns(settings.after_s)
    return anchor - before, anchor + after


def _ns(seconds: float) -> np.int64:
    return np.int64(round(seconds * NS_PER_SECOND))
