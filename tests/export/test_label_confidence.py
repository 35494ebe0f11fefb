"""Label confidence: Dawid & Skene (1979) by EM, checked on the paper's data and on simulated coders."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import minimize
from scipy.special import log_softmax, logsumexp

from export.label_confidence import FULL_FORM_UNITS, confidence_column, dawid_skene, fit_label_confidence, one_coin_theta
from export.reader import read_windows
from tests.conftest import assert_user_error, call_cli

from export_study_data import export_file

TABLE_1 = Path(__file__).resolve().parents[1] / "data" / "dawid_skene_1979_table1.csv"


def table_1_counts() -> np.ndarray:
    """(45 patients, 5 anaesthetists, 4 codes) counts from Dawid & Skene (1979), Table 1."""
    table = pd.read_csv(TABLE_1, comment="#", dtype=str)
    counts = np.zeros((45, 5, 4))
    for patient, row in enumerate(table.itertuples(index=False)):
        for observer, codes in enumerate(row[1:]):
            for code in codes.split():
                counts[patient, observer, int(code) - 1] += 1
    return counts


def negative_log_likelihood(parameters: np.ndarray, counts: np.ndarray) -> float:
    """The incomplete-data log-likelihood of Dawid & Skene (1979), eq. 2.7, in softmax coordinates."""
    units, coders, codes = counts.shape
    log_prevalence = log_softmax(parameters[:codes])
    log_theta = log_softmax(parameters[codes:].reshape(coders, codes, codes), axis=2)
    return -float(logsumexp(log_prevalence[None, :] + np.einsum("ijl,jkl->ik", counts, log_theta), axis=1).sum())


def test_em_on_the_published_anaesthetist_data_reaches_a_likelihood_maximum() -> None:
    counts = table_1_counts()
    assert counts.sum() == 45 * 7                                        # Table 1: 315 codes
    result = dawid_skene(counts, "full")
    assert result.converged
    assert np.all(np.diff(result.trace) >= -1e-9)                        # EM never lowers the likelihood (their Section 2)
    # Reference: scipy's L-BFGS started at the EM estimate finds nothing better (a maximum, not just a stop).
    start = np.concatenate([np.log(np.maximum(result.prevalence, 1e-12)), np.log(np.maximum(result.theta, 1e-12)).ravel()])
    polished = minimize(negative_log_likelihood, start, args=(counts,), method="L-BFGS-B")
    assert -polished.fun - result.log_likelihood < 1e-3
    assert result.log_likelihood == pytest.approx(-negative_log_likelihood(start, counts), abs=1e-6)
    # From memory of the paper's results: about 40 % of patients in class 1 and 42 % in class 2.
    assert result.prevalence[:2] == pytest.approx([0.40, 0.42], abs=0.01)
    unanimous = (counts.sum(axis=1).max(axis=1) == 7)
    assert np.all(result.posterior[unanimous].argmax(axis=1) == counts.sum(axis=1)[unanimous].argmax(axis=1))


def simulate(theta: np.ndarray, prevalence: np.ndarray, units: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(counts (units, coders, codes), true codes): every coder codes every unit once."""
    rng = np.random.default_rng(seed)
    truth = rng.choice(len(prevalence), units, p=prevalence)
    counts = np.zeros((units, theta.shape[0], len(prevalence)))
    for coder in range(theta.shape[0]):
        reported = (rng.random((units, 1)) > np.cumsum(theta[coder, truth], axis=1)).sum(axis=1)
        counts[np.arange(units), coder, reported] = 1
    return counts, truth


def test_full_form_recovers_known_confusion_matrices_of_three_coders() -> None:
    prevalence = np.array([0.5, 0.3, 0.2])
    theta = np.array([
        [[0.9, 0.05, 0.05], [0.1, 0.8, 0.1], [0.05, 0.15, 0.8]],
        [[0.7, 0.2, 0.1], [0.05, 0.9, 0.05], [0.2, 0.1, 0.7]],
        [[0.85, 0.1, 0.05], [0.2, 0.7, 0.1], [0.1, 0.1, 0.8]],
    ])
    counts, truth = simulate(theta, prevalence, 4000, seed=1)
    result = dawid_skene(counts, "full")
    assert result.theta == pytest.approx(theta, abs=0.04)
    assert result.prevalence == pytest.approx(prevalence, abs=0.03)
    majority = counts.sum(axis=1).argmax(axis=1)
    assert (result.posterior.argmax(axis=1) == truth).mean() >= (majority == truth).mean()


@pytest.mark.parametrize("accuracy", [(0.9, 0.7), (0.85, 0.85)])
def test_one_coin_form_recovers_two_coders_accuracies(accuracy) -> None:
    prevalence = np.array([0.6, 0.3, 0.1])
    counts, truth = simulate(one_coin_theta(np.array(accuracy), prevalence), prevalence, 5000, seed=2)
    result = dawid_skene(counts, "one-coin")
    assert np.diagonal(result.theta, axis1=1, axis2=2)[:, 0] == pytest.approx(accuracy, abs=0.03)
    assert result.prevalence == pytest.approx(prevalence, abs=0.03)
    assert np.allclose(result.posterior.sum(axis=1), 1.0)


def observations(coders_per_unit: int, units: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = [{"unit": f"u{u}", "coder": f"c{c}", "affect": rng.choice(["bored", "focused", "unclear"], p=[0.3, 0.6, 0.1])}
            for u in range(units) for c in range(coders_per_unit)]
    return pd.DataFrame(rows)


def test_the_form_follows_how_many_coders_coded_the_same_units() -> None:
    two = fit_label_confidence(observations(2, 40), "affect", could_not_observe="unclear")
    assert two.summary["form"] == "one-coin" and two.summary["codes"] == ["bored", "focused"]
    assert list(two.posterior.columns) == [confidence_column("affect", "bored"), "p_affect_focused"]
    three = fit_label_confidence(observations(3, FULL_FORM_UNITS), "affect")
    assert three.summary["form"] == "full"
    assert fit_label_confidence(observations(1, 40), "affect") is None            # nothing to learn accuracy from


def test_export_carries_posteriors_and_check_weights_by_them(tmp_path) -> None:
    path, result = export_file(tmp_path, output_format="csv")
    table, manifest = read_windows(path)
    columns = manifest["confidence_columns"]["activity"]
    assert columns == ["p_activity_off_task", "p_activity_on_task"]
    assert manifest["label_confidence"]["activity"]["form"] == "one-coin"
    coded = table["activity"].notna()
    assert np.allclose(table.loc[coded, columns].sum(axis=1), 1.0)
    assert table[columns].isna().any(axis=1).sum() > 0                           # both could not observe: no posterior
    agreed = table["label_source_activity"] == "agreed"
    hard = np.where(table.loc[agreed, "activity"] == "on_task", table.loc[agreed, columns[1]], table.loc[agreed, columns[0]])
    assert hard.mean() > 0.9                                                      # two agreeing coders: confident
    disagreed = table["label_source_activity"] == "first-coder"
    assert table.loc[disagreed, columns].max(axis=1).mean() < hard.mean()
    weighted = call_cli("check", path, "--weight", "confidence", "--dimension", "activity", "--json")
    assert weighted.returncode == 0, weighted.stderr
    payload = json.loads(weighted.stdout)
    assert payload["weight"] == "confidence"
    routes = payload["dimensions"]["activity"]["label_routes"]
    assert {route["group"] for route in routes} == {"agreed or adjudicated", "coders disagreed"}


def test_weighting_refuses_a_file_without_posteriors(tmp_path) -> None:
    path, _ = export_file(tmp_path, output_format="csv")
    manifest_file = path.with_suffix(".manifest.json")
    manifest = json.loads(manifest_file.read_text())
    manifest["confidence_columns"] = {}                                           # as written before label confidence
    manifest_file.write_text(json.dumps(manifest))
    assert_user_error(call_cli("check", path, "--weight", "confidence"), "windows.csv", "activity",
                      "label-confidence")
