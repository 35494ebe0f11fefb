"""``fieldmark demo`` end to end, in a subprocess exactly as a user runs it."""
from __future__ import annotations

import base64
import json
import re
import time

import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from demo_sessions.command import human_summary
from demo_sessions.pipeline import SUMMARY_KEYS
from observer_app.study.store import Store
from tests.conftest import assert_user_error, call_cli, run_cli

SEED = 5


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo-command")
    began = time.perf_counter()
    result = run_cli("demo", "--out", out, "--seed", SEED, "--json")
    return out, result, time.perf_counter() - began


def test_demo_finishes_within_a_minute_and_prints_one_json_object(demo_run):
    out, result, seconds = demo_run
    assert result.returncode == 0, result.stderr
    assert seconds < 60, seconds
    assert json.loads(result.stdout) == json.loads((out / "summary.json").read_text())
    assert "fieldmark demo" in result.stderr  # the progress bar goes to stderr


def test_summary_has_the_documented_keys_and_labels_the_truth(demo_run):
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    assert list(summary) == list(SUMMARY_KEYS)
    assert summary["seed"] == SEED
    planted = json.loads((out / "truth.json").read_text())["devices"]
    assert set(summary["devices"]) == set(planted)
    for device, figures in summary["devices"].items():
        assert set(figures) == {"truth", "recovered", "recovered_automatic"}
        assert figures["truth"]["offset_s"] == planted[device]["offset_s"]
        assert figures["truth"]["drift_ppm"] == planted[device]["drift_ppm"]
    assert [step["name"] for step in summary["steps"]] == ["generate", "align", "coder_vs_truth", "agree", "export",
                                                            "check"]
    assert (out / "study" / "study.toml").is_file()


def test_aligned_clocks_recover_the_planted_ones(demo_run):
    """The align step's stored models, compared with truth.json at the planted reference time.

    Bounds from the sync issue: offset within 1 s, drift within 10 ppm, by sync marks.
    """
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    planted = json.loads((out / "truth.json").read_text())["devices"]
    with Store(out / "study" / "observations.sqlite") as store:
        rows = store.clock_models()
    stored = {device: json.loads(text) for device, text in zip(rows["device"], rows["model_json"])}
    for device, figures in summary["devices"].items():
        recovered, model, truth = figures["recovered"], stored[device], planted[device]
        assert recovered["method"] == "marks" == model["method"]
        # the stored line, restated at the planted reference (device = log + offset + drift * (log - reference))
        reference = pd.Timestamp(truth["reference"]).value
        restated = model["offset_s"] + model["drift_ppm"] * 1e-6 * (reference - model["reference_ns"]) / 1e9
        assert recovered["offset_s"] == pytest.approx(restated, abs=1e-3)  # computed from the store, not copied
        assert recovered["versus_truth"]["offset_error_s"] == pytest.approx(restated - truth["offset_s"], abs=2e-3)
        assert abs(restated - truth["offset_s"]) < 1.0
        assert abs(model["drift_ppm"] - truth["drift_ppm"]) < 10.0
        assert figures["recovered_automatic"]["method"] == "auto"


def test_coder_vs_truth_figures_are_computed_from_the_study(demo_run):
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    truth = pd.read_parquet(out / "truth_windows.parquet")
    with Store(out / "study" / "observations.sqlite") as store:
        observations = store.observations(["activity", "affect"])
    joined = observations.merge(truth, on="observation_id", suffixes=("", "_true"))
    for dimension, unseen in (("activity", "not_visible"), ("affect", "unclear")):
        for coder, figures in summary["coder_vs_truth"][dimension].items():
            rows = joined[(joined["coder"] == coder) & joined[dimension].notna() & joined[dimension].ne(unseen)]
            expected = cohen_kappa_score(rows[dimension].astype(str), rows[f"{dimension}_true"].astype(str))
            assert figures["kappa"] == pytest.approx(expected, abs=1e-4)  # reference: scikit-learn
            assert figures["windows"] == len(rows)


def test_agreement_figures_match_scikit_learn_on_the_paired_windows(demo_run):
    """The agree step's Cohen's kappa equals scikit-learn's on the paired slots (same run, slot, learner)."""
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    with Store(out / "study" / "observations.sqlite") as store:
        observations = store.observations(["activity", "affect"])
    paired = observations[observations["paired_start"].notna()]
    wide = paired.pivot_table(index=["pairing_id", "slot"], columns="coder", values=["activity", "affect"],
                              aggfunc="first")
    for dimension, unseen in (("activity", "not_visible"), ("affect", "unclear")):
        both = wide[dimension].dropna()
        both = both[(both != unseen).all(axis=1)]
        figures = summary["dimensions"][dimension]
        assert figures["units"] == len(both)
        expected = cohen_kappa_score(both["coder_a"], both["coder_b"])  # reference: scikit-learn
        assert figures["kappa"]["value"] == pytest.approx(expected, abs=1e-9)
        for name in ("kappa", "alpha"):
            assert figures[name]["low"] < figures[name]["value"] < figures[name]["high"]


def test_exported_windows_are_what_the_summary_says_and_carry_no_identifiers(demo_run):
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    windows = pd.read_parquet(out / "windows.parquet")
    assert summary["windows"]["written"] == len(windows) > 0
    roster = pd.read_csv(out / "study" / "roster.csv", dtype=str)
    private = set(roster["learner"]) | set(roster["log_id"]) | set(roster["label"])
    for column in windows.columns[windows.dtypes.astype(str).isin(["object", "string", "str"])]:
        assert not set(windows[column].dropna().astype(str)) & private, column


def test_detector_check_finds_the_planted_signal(demo_run):
    """The simulator's action rates depend on the true activity, so a detector trained on the
    exported log features must beat the majority baseline for activity (grouped folds)."""
    out, _, _ = demo_run
    summary = json.loads((out / "summary.json").read_text())
    windows = pd.read_parquet(out / "windows.parquet")
    for dimension, check in summary["detector"].items():
        assert check["rows"] == int(windows[dimension].notna().sum())  # computed from the exported file
        assert check["learners"] == windows.loc[windows[dimension].notna(), "group"].nunique()
    activity = summary["detector"]["activity"]
    assert activity["model"]["auc"] > activity["majority_baseline"]["auc"] + 0.1


def test_report_is_self_contained_with_embedded_figures(demo_run):
    out, _, _ = demo_run
    page = (out / "report.html").read_text()
    assert not re.search(r"""(src|href)=["']?(https?:|//|file:)""", page)
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', page)
    assert len(images) >= 3
    assert all(base64.b64decode(image).startswith(b"\x89PNG\r\n\x1a\n") for image in images)  # PNG signature (RFC 2083)


def test_demo_into_a_folder_holding_a_demo_is_refused_in_one_line(demo_run):
    out, _, _ = demo_run
    assert_user_error(call_cli("demo", "--out", out), "already exists")
    assert_user_error(call_cli("demo", "--out", out / "study" / "study.toml"), "is a file")


def test_a_negative_seed_is_refused_in_one_line(tmp_path):
    assert_user_error(call_cli("demo", "--out", tmp_path, "--seed", "-3"), "--seed")
    assert not any(tmp_path.iterdir())  # nothing half-written


def test_human_summary_names_each_device_and_the_outputs(demo_run):
    out, _, _ = demo_run
    text = human_summary(json.loads((out / "summary.json").read_text()))
    assert "laptop-a: truth" in text and "laptop-b: truth" in text
    assert "summary.json" in text and "report.html" in text
    assert "Cohen's kappa" in text and "Krippendorff's alpha" in text
    assert "windows written" in text and "detector check, activity" in text
