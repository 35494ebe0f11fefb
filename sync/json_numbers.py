"""Numbers as JSON can hold them: one home for "NaN and infinity become null".

JSON has no NaN (RFC 8259 section 6), and Python's json module would write the bare
word NaN that other readers reject; every --json output and stored model goes through here.
"""
from __future__ import annotations

import math

import numpy as np


def finite_or_none(value: float | None, digits: int | None = None) -> float | None:
    """A finite number as a float (rounded to ``digits`` when given); None for NaN, infinity or None."""
    if value is None or not np.isfinite(value):
        return None
    return float(value) if digits is None else round(float(value), digits)


def json_safe(value: object) -> object:
    """``value`` with every non-finite float inside dicts and lists replaced by None."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {key: json_safe(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(item) for item in value]
    return value
