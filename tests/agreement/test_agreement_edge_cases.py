"""Edge cases: undefined figures are reported as undefined, never a crash."""
from __future__ import annotations

import json

import pandas as pd

from agreement.dimensions import Dimension
from agreement.statistics import assess_agreement
from agreement.pairing import pair_observations
from tests.conftest import call_cli, run_cli

ACTIVITY = Dimension("activity", "nominal", ("on_task", "off_task", "not_visible"), could_not_observe="not_visible")


def units_from(rows):
    frame = pd.DataFrame(rows, columns=["unit", "coder", "learner", "activity"])
    return frame.assign(activity=frame["activity"].astype("string"), session_id="", time=pd.NaT, note="")


def test_single_category_kappa_is_undefined_via_cli(tmp_path):
    # Cohen (1960): kappa = (p_o - p_e) / (1 - p_e) is 0/0 when both coders use one code.
    csv = tmp_path / "one_code.csv"
    csv.write_text("unit,coder,activity\n" + "".join(f"u{i},ann,on_task\nu{i},ben,on_task\n" for i in range(6)))
    result = run_cli("agree", str(csv), "--json", "--resamples", "50")
    assert result.returncode == 0, result.stderr
    entry = json.loads(result.stdout)["dimensions"]["activity"]
    assert entry["percent_agreement"]["value"] == 1.0
    for key in ("cohen_kappa", "fleiss_kappa", "alpha", "max_kappa"):
        assert entry[key] == {"value": None, "low": None, "high": None}, key
    assert entry["band"] == "undefined"
    human = call_cli("agree", str(csv), "--resamples", "50")
    assert human.returncode == 0 and "undefined" in human.stdout


def test_single_coder_gives_no_units():
    units = units_from([("u1", "ann", "L1", "on_task"), ("u2", "ann", "L1", "off_task")])
    result = assess_agreement(units, [ACTIVITY], resamples=50).dimensions["activity"]
    assert result.units == 0
    assert all(estimate.value is None for estimate in result.figures.values())
    assert result.band == "undefined"


def test_no_pairs_from_observations(observations):
    observations.add("ann", "L01", 0, activity="on_task")
    observations.add("ben", "L02", 0, activity="on_task")
    units, report = pair_observations(observations.frame(), ["activity"], tolerance_s=10)
    assert report.units == 0 and report.unmatched == 2
    result = assess_agreement(units, [ACTIVITY], resamples=50)
    assert result.units == 0 and result.dimensions["activity"].figures["alpha"].value is None


def test_all_could_not_observe_is_reported_separately():
    units = units_from([(f"u{i}", coder, "L1", "not_visible") for i in range(4) for coder in ("ann", "ben")])
    result = assess_agreement(units, [ACTIVITY], resamples=50).dimensions["activity"]
    assert result.units == 0 and result.figures["cohen_kappa"].value is None
    assert result.could_not_observe.codes == 8 and not result.could_not_observe.included
    assert "not_visible" not in result.codes


def test_could_not_observe_excluded_by_default_and_included_on_request():
    rows = [("u1", "ann", "L1", "on_task"), ("u1", "ben", "L1", "on_task"),
            ("u2", "ann", "L2", "off_task"), ("u2", "ben", "L2", "off_task"),
            ("u3", "ann", "L3", "not_visible"), ("u3", "ben", "L3", "on_task")]
    units = units_from(rows)
    excluded = assess_agreement(units, [ACTIVITY], resamples=50).dimensions["activity"]
    included = assess_agreement(units, [ACTIVITY], resamples=50,
                                include_could_not_observe=True).dimensions["activity"]
    assert excluded.units == 2 and excluded.figures["percent_agreement"].value == 1.0
    assert excluded.could_not_observe.units_one_coder_could_not == 1
    assert included.units == 3 and included.figures["percent_agreement"].value == 2 / 3


def test_landis_koch_bands_at_their_published_bounds():
    # Landis & Koch (1977), Biometrics 33:159-174, benchmark table (from memory):
    # <0 poor, .00-.20 slight, .21-.40 fair, .41-.60 moderate, .61-.80 substantial, .81-1 almost perfect.
    from agreement.coefficients import landis_koch_band

    cases = {-0.01: "poor", 0.0: "slight", 0.20: "slight", 0.21: "fair", 0.40: "fair", 0.41: "moderate",
             0.60: "moderate", 0.61: "substantial", 0.80: "substantial", 0.81: "almost perfect",
             1.0: "almost perfect", None: "undefined"}
    for kappa, label in cases.items():
        assert landis_koch_band(kappa) == label, kappa
