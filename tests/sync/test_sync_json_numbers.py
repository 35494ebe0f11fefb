"""The one NaN-to-null rule: what it writes is JSON by RFC 8259 section 6 (no NaN, no Infinity)."""
from __future__ import annotations

import json
import math

from sync.clock import ClockModel
from sync.json_numbers import finite_or_none, json_safe


def test_non_finite_numbers_become_null_at_any_depth():
    document = {"a": math.nan, "b": [1.5, math.inf, {"c": -math.inf}], "d": (2.0, math.nan), "e": "NaN"}
    text = json.dumps(json_safe(document), allow_nan=False)  # raises on any NaN or infinity left
    assert json.loads(text) == {"a": None, "b": [1.5, None, {"c": None}], "d": [2.0, None], "e": "NaN"}
    assert finite_or_none(math.nan) is None and finite_or_none(None) is None
    assert finite_or_none(2.34567, 2) == 2.35


def test_a_stored_clock_model_is_strict_json_and_reads_back():
    model = ClockModel(device="laptop-a", method="manual", offset_s=3.0)  # its standard errors are NaN
    text = model.to_json()
    json.loads(text, parse_constant=lambda name: (_ for _ in ()).throw(ValueError(name)))
    back = ClockModel.from_json(text)
    assert back.offset_s == 3.0 and math.isnan(back.offset_standard_error_s)
