"""Clock models: planted-truth recovery (tests/sync/planted_clock.py), the convention,
JSON round trip, and the scan's building blocks against DuckDB and statsmodels."""
from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from sync.clock import ClockModel, MarkResidual, manual_model
from sync.clock_marks import fit_from_marks
from sync.clock_scan import code_event_totals, likelihood_ratio_curve, scan_offset
from sync.event_table import build_events, combine_events, learner_blocks

import sync_planted_clock as planted_clock
from sync_planted_clock import DRIFT_PPM, OFFSET_S, REFERENCE


@pytest.fixture(scope="module")
def planted():
    return planted_clock.build(seed=5)


def planted_offset_at(reference_ns: int) -> float:
    """The PLANTED offset expressed at another reference time (same line, other origin)."""
    return OFFSET_S + DRIFT_PPM * 1e-6 * (reference_ns - REFERENCE.value) / 1e9


def test_marks_recover_the_planted_offset_and_drift(planted):
    model = fit_from_marks(planted.marks, planted.events)
    assert model.method == "marks"
    assert abs(model.offset_s - planted_offset_at(model.reference_ns)) <= 1.0
    assert abs(model.drift_ppm - DRIFT_PPM) <= 10.0
    assert model.marks_used >= len(planted.marks) - 5
    assert model.median_abs_residual_s < 0.5
    # Any mark named as outlying is one of the marks planted as late presses.
    planted_late = set(planted.marks.loc[planted.marks["outlier_planted"], "mark_id"])
    assert set(model.outlying_marks) <= planted_late
    # The planted truth also predicts each mark's device time from its matched event.
    truth = planted_clock.TRUTH
    for residual in model.residuals:
        if not residual.outlier:
            predicted = truth.to_device_ns(np.array([residual.event_ns]))[0]
            assert abs(predicted - residual.device_ns) < 1.5e9


def test_automatic_scan_recovers_the_planted_offset_and_drift(planted):
    model = scan_offset(planted.observations, planted.events, ["activity", "affect"])
    assert model.method == "auto"
    assert abs(model.offset_s - planted_offset_at(model.reference_ns)) <= 1.0
    assert abs(model.drift_ppm - DRIFT_PPM) <= 10.0
    assert model.confidence > 0.5 and not any("ambiguous" in w for w in model.warnings)
    assert len(model.scan_offsets_s) == 1201 and len(model.scan_scores) == 1201


def test_codes_unrelated_to_the_log_give_a_low_confidence_warning(planted):
    shuffled = planted.observations.copy()
    rng = np.random.default_rng(3)
    shuffled["activity"] = rng.permutation(shuffled["activity"].to_numpy())
    model = scan_offset(shuffled, planted.events, ["activity", "affect"])
    assert model.confidence < 0.5
    assert any("no clear best offset" in w for w in model.warnings)


def test_short_session_does_not_guess_a_drift(planted):
    first_hour = planted.observations.sort_values("window_start").head(150)
    model = scan_offset(first_hour, planted.events, ["activity"])
    assert model.drift_ppm == 0.0
    assert any("drift not estimated" in w for w in model.warnings)


def test_convention_device_ahead_means_positive_offset():
    # A device 30 s ahead with no drift: device 10:00:30 is log 10:00:00 (sync/tables.py).
    model = manual_model("laptop-a", 30.0)
    device = pd.Timestamp("2026-03-02T10:00:30Z").value
    assert model.to_log_ns(np.array([device]))[0] == pd.Timestamp("2026-03-02T10:00:00Z").value


def test_to_log_is_exact_against_rational_arithmetic():
    model = ClockModel(device="d", method="marks", offset_s=-12.345678901, drift_ppm=87.5,
                       reference_ns=pd.Timestamp("2026-03-02T08:00:00Z").value)
    device = np.array([pd.Timestamp("2026-03-09T17:31:07.123456789Z").value, model.reference_ns])
    got = model.to_log_ns(device)
    for d, log in zip(device, got):
        # log = reference + (device - reference - offset) / (1 + drift), in exact fractions.
        exact = Fraction(model.reference_ns) + (Fraction(int(d)) - model.reference_ns - Fraction("-12.345678901") * 10**9) \
            / (1 + Fraction("87.5") / 10**6)
        assert abs(Fraction(int(log)) - exact) <= 1
    assert np.all(np.abs(model.to_device_ns(got) - device) <= 1)


def test_json_round_trip_keeps_every_field():
    model = ClockModel(device="laptop-b", method="marks", offset_s=37.4, drift_ppm=45.0, reference_ns=123,
                       marks_used=3, median_abs_residual_s=0.12, confidence=0.75, warnings=("w",),
                       residuals=(MarkResidual("m1", "n-0001", 10, 9, 0.5, True),),
                       scan_offsets_s=(0.0, 0.5), scan_scores=(1.0, 2.0))
    assert ClockModel.from_json(model.to_json()) == model
    manual = manual_model("x", 2.0)
    again = ClockModel.from_json(manual.to_json())
    assert again.offset_s == 2.0 and np.isnan(again.confidence)


def test_event_totals_match_duckdb_range_join():
    rng = np.random.default_rng(4)
    parts = []
    for learner in ("n-0001", "n-0002"):
        t = np.sort(rng.integers(0, 3600 * 10**9, 3000))
        parts.append(build_events(learner=[learner] * len(t), time_ns=t, source="x", source_row=np.arange(len(t))))
    events = combine_events(parts)
    n = 200
    learners = rng.choice(["n-0001", "n-0002", "n-0009"], n)
    start = rng.integers(10**11, 3000 * 10**9, n)
    end = start + 20 * 10**9
    code = rng.integers(-1, 3, n)
    offsets_s = np.arange(-30, 30.5, 0.5)
    totals = code_event_totals(events["time_ns"].to_numpy(), learner_blocks(events), learners, start, end,
                               np.round(offsets_s * 1e9).astype(np.int64), code[:, None], [3])[0]
    con = duckdb.connect()
    con.register("events", pd.DataFrame({"learner": events["learner"].astype(str), "t": events["time_ns"]}))
    con.register("windows", pd.DataFrame({"learner": learners, "s": start, "e": end, "code": code}))
    for column in (0, 17, 60, 120):
        o = int(round(offsets_s[column] * 1e9))
        reference = con.execute(
            "SELECT w.code, count(ev.t) FROM windows w JOIN events ev ON ev.learner = w.learner "
            f"AND ev.t >= w.s - {o} AND ev.t < w.e - {o} WHERE w.code >= 0 GROUP BY w.code").fetchall()
        expected = np.zeros(3, dtype=np.int64)
        for c, count in reference:
            expected[c] = count
        assert list(totals[:, column]) == list(expected)


def test_likelihood_ratio_matches_statsmodels_poisson_glm():
    rng = np.random.default_rng(8)
    code = rng.integers(0, 3, 300)
    seconds = rng.uniform(10, 30, 300)
    counts = rng.poisson(np.array([0.2, 0.5, 1.0])[code] * seconds)
    totals = np.bincount(code, weights=counts, minlength=3)[:, None]
    exposure = np.bincount(code, weights=seconds, minlength=3)
    ours = likelihood_ratio_curve([totals], [exposure])[0]
    # Reference: LR statistic of a Poisson GLM with the code vs intercept only, log exposure offset.
    design = sm.add_constant(pd.get_dummies(code, drop_first=True).to_numpy(dtype=float))
    full = sm.GLM(counts, design, family=sm.families.Poisson(), offset=np.log(seconds)).fit()
    null = sm.GLM(counts, np.ones((300, 1)), family=sm.families.Poisson(), offset=np.log(seconds)).fit()
    assert ours == pytest.approx(null.deviance - full.deviance, rel=1e-9)


def test_residual_plot_is_a_png_for_every_kind_of_model(planted):
    from sync.residual_plot import residual_plot_png
    marks = fit_from_marks(planted.marks, planted.events)
    for model in (marks, manual_model("laptop-c", 1.0),
                  ClockModel(device="d", method="auto", offset_s=1.0, scan_offsets_s=(0.0, 0.5, 1.0),
                             scan_scores=(1.0, 3.0, 2.0))):
        png = residual_plot_png(model)
        # PNG signature (ISO/IEC 15948 / RFC 2083, section 3.1).
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 2000


def test_unknown_method_is_refused():
    with pytest.raises(ValueError):
        ClockModel(device="d", method="guess", offset_s=0.0)
