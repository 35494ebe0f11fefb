"""Published worked examples, reproduced through `fieldmark agree` on long-format CSVs."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from agreement.dimensions import Dimension
from agreement.statistics import assess_agreement
from tests.conftest import call_cli, run_cli

# Krippendorff, K. (2011). "Computing Krippendorff's Alpha-Reliability", Annenberg
# School for Communication, University of Pennsylvania: the example with four observers
# A-D, twelve units and missing values (section "C. Any number of observers ...
# values missing").  The same matrix is in the krippendorff package's own tests.
KRIPPENDORFF_2011 = [
    [1, 2, 3, 3, 2, 1, 4, 1, 2, None, None, None],   # observer A
    [1, 2, 3, 3, 2, 2, 4, 1, 2, 5, None, 3],          # observer B
    [None, 3, 3, 3, 2, 3, 4, 2, 2, 5, 1, None],       # observer C
    [1, 2, 3, 3, 2, 4, 4, 1, 2, 5, 1, None],          # observer D
]
# Published alphas for that data (Krippendorff 2011): nominal .743, ordinal .815,
# interval .849, ratio .797.  Ordinal .815 and ratio .797 are also asserted in the
# krippendorff package's tests (tests/test_krippendorff.py); nominal and interval are
# the paper's values as we recall them ("from memory"), cross-checked against the
# krippendorff package below.
KRIPPENDORFF_2011_ALPHA = {"nominal": 0.743, "ordinal": 0.815, "interval": 0.849, "ratio": 0.797}

# Fleiss' kappa worked example, widely reproduced (e.g. the Wikipedia article
# "Fleiss' kappa", and statsmodels' tests/test_inter_rater.py table0): 10 subjects,
# 14 raters, 5 categories; counts of raters per category; kappa = 0.210.
FLEISS_EXAMPLE = np.array([
    [0, 0, 0, 0, 14],
    [0, 2, 6, 4, 2],
    [0, 0, 3, 5, 6],
    [0, 3, 9, 2, 0],
    [2, 2, 8, 1, 1],
    [7, 7, 0, 0, 0],
    [3, 2, 6, 3, 0],
    [2, 5, 3, 2, 2],
    [6, 5, 2, 1, 0],
    [0, 2, 2, 3, 7],
])
FLEISS_KAPPA = 0.210
# Per-subject agreement P_i of subject 2 in the same worked example: 0.253.
FLEISS_SUBJECT_2_AGREEMENT = 0.253

# Cohen's kappa 2x2 worked example of the Wikipedia article "Cohen's kappa" (section
# "Simple example"; from memory): 50 grant proposals read by A and B; both yes 20,
# A yes / B no 5, A no / B yes 10, both no 15 -> p_o = 0.70, p_e = 0.50, kappa = 0.40.
COHEN_TABLE = {("yes", "yes"): 20, ("yes", "no"): 5, ("no", "yes"): 10, ("no", "no"): 15}
COHEN_KAPPA = 0.40


def write_krippendorff_csv(path: Path) -> Path:
    rows = []
    for observer, values in zip("ABCD", KRIPPENDORFF_2011):
        for unit, value in enumerate(values, start=1):
            rows.append({"unit": f"unit{unit}", "coder": observer, "value": "" if value is None else str(value)})
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def write_fleiss_csv(path: Path) -> Path:
    rows = []
    for subject, counts in enumerate(FLEISS_EXAMPLE, start=1):
        ratings = np.repeat(np.arange(1, 6), counts)
        for rater, rating in enumerate(ratings, start=1):
            rows.append({"unit": f"s{subject}", "coder": f"r{rater}", "category": f"c{rating}"})
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def write_cohen_csv(path: Path) -> Path:
    rows = []
    number = 0
    for (first, second), count in COHEN_TABLE.items():
        for _ in range(count):
            number += 1
            rows += [{"unit": f"p{number}", "coder": "A", "decision": first},
                     {"unit": f"p{number}", "coder": "B", "decision": second}]
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def agree_json(*args: str, subprocess: bool = False) -> dict:
    """`fieldmark agree ARGS --json`; in a subprocess exactly as a user runs it when asked."""
    result = (run_cli if subprocess else call_cli)("agree", *args, "--json", "--resamples", "200")
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout)


@pytest.mark.parametrize("level", ["nominal", "ordinal", "interval", "ratio"])
def test_krippendorff_2011_alpha_at_each_level_via_cli(tmp_path, level):
    # Source: Krippendorff (2011), see KRIPPENDORFF_2011_ALPHA.
    csv = write_krippendorff_csv(tmp_path / "krippendorff.csv")
    document = agree_json(str(csv), "--level", level, subprocess=level == "nominal")
    figure = document["dimensions"]["value"]["alpha"]
    assert round(figure["value"], 3) == KRIPPENDORFF_2011_ALPHA[level]
    assert figure["low"] <= figure["value"] <= figure["high"]


def test_krippendorff_2011_all_levels_in_one_ratio_run(tmp_path):
    # Source: Krippendorff (2011); a ratio scale reports alpha at every weaker level too.
    csv = write_krippendorff_csv(tmp_path / "krippendorff.csv")
    entry = agree_json(str(csv), "--level", "ratio")["dimensions"]["value"]
    for level, published in KRIPPENDORFF_2011_ALPHA.items():
        assert round(entry[f"alpha_{level}"]["value"], 3) == published


def test_krippendorff_2011_matches_the_krippendorff_package():
    # Reference: the krippendorff package (PyPI) on the same matrix, all four levels.
    import krippendorff

    matrix = np.array([[np.nan if v is None else v for v in row] for row in KRIPPENDORFF_2011], dtype=float)
    rows = [{"unit": f"u{u}", "coder": c, "learner": f"u{u}", "value": None if v is None else str(v)}
            for c, values in zip("ABCD", KRIPPENDORFF_2011) for u, v in enumerate(values)]
    units = pd.DataFrame(rows).assign(value=lambda f: f["value"].astype("string"))
    result = assess_agreement(units, [Dimension("value", "ratio", ("1", "2", "3", "4", "5"))], resamples=10)
    for level in KRIPPENDORFF_2011_ALPHA:
        ours = result.dimensions["value"].figures[f"alpha_{level}"].value
        assert ours == pytest.approx(krippendorff.alpha(matrix, level_of_measurement=level), abs=1e-12)


def test_fleiss_worked_example_via_cli(tmp_path):
    # Source: Fleiss (1971) kappa worked example, 10 subjects x 14 raters x 5 categories (FLEISS_KAPPA).
    csv = write_fleiss_csv(tmp_path / "fleiss.csv")
    entry = agree_json(str(csv))["dimensions"]["category"]
    assert round(entry["fleiss_kappa"]["value"], 3) == FLEISS_KAPPA
    assert entry["units"] == 10
    assert entry["cohen_kappa"]["value"] is None  # 14 raters: Cohen's kappa is for two
    assert entry["band"] == "fair"  # Landis & Koch (1977): 0.21-0.40 is "fair"


def test_fleiss_worked_example_subject_agreement(tmp_path):
    # Source: same worked example, P_2 = 0.253 (one subject on its own: percent agreement = P_i).
    rows = [{"unit": "s2", "coder": f"r{i}", "learner": "s2", "category": f"c{c}"}
            for i, c in enumerate(np.repeat(np.arange(1, 6), FLEISS_EXAMPLE[1]))]
    units = pd.DataFrame(rows).assign(category=lambda f: f["category"].astype("string"))
    result = assess_agreement(units, [Dimension("category", "nominal", ("c1", "c2", "c3", "c4", "c5"))], resamples=10)
    assert round(result.dimensions["category"].figures["percent_agreement"].value, 3) == FLEISS_SUBJECT_2_AGREEMENT


def test_cohen_two_by_two_worked_example_via_cli(tmp_path):
    # Source: Wikipedia "Cohen's kappa", simple example (COHEN_KAPPA; from memory).
    csv = write_cohen_csv(tmp_path / "cohen.csv")
    entry = agree_json(str(csv), subprocess=True)["dimensions"]["decision"]
    assert round(entry["cohen_kappa"]["value"], 3) == COHEN_KAPPA
    assert round(entry["percent_agreement"]["value"], 3) == 0.70
    # PABAK for two categories = 2 p_o - 1 (Byrt, Bishop & Carlin 1993): 2 * 0.70 - 1 = 0.40.
    assert round(entry["pabak"]["value"], 3) == 0.40
    # Maximum kappa (Cohen 1960): marginals A yes 25/no 25, B yes 30/no 20, so at most
    # min(25,30) + min(25,20) = 45 of 50 agree: (0.90 - 0.50) / (1 - 0.50) = 0.80 (by hand).
    assert round(entry["max_kappa"]["value"], 3) == 0.80
    # Landis & Koch (1977): 0.21-0.40 is "fair".
    assert entry["band"] == "fair"
    # The confusion matrix is the published 2x2 table (rows A, columns B; codes sorted: no, yes).
    assert entry["confusion"]["rows"] == "A" and entry["confusion"]["columns"] == "B"
    assert entry["confusion"]["codes"] == ["no", "yes"]
    assert entry["confusion"]["counts"] == [[15, 10], [5, 20]]


def test_json_keys_are_the_documented_ones(tmp_path):
    # The contract in agreement/tables.py (copied into the README) is what --json prints.
    from agreement.tables import JSON_DIMENSION_KEYS, JSON_TOP_KEYS

    csv = write_cohen_csv(tmp_path / "cohen.csv")
    document = agree_json(str(csv))
    assert list(document) == list(JSON_TOP_KEYS)
    assert list(document["dimensions"]["decision"]) == list(JSON_DIMENSION_KEYS)
