"""Per-group figures with learner-cluster intervals, and transfer to groups the detector never saw."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score, recall_score, roc_auc_score

from export.cluster_bootstrap import learner_tables
from export.subgroups import group_figures
from export.transfer import transfer_audit
from tests.conftest import assert_user_error, call_cli

from export_study_data import export_file

CODES = np.array(["bored", "confused", "focused"])


def predictions(learners: int, per_learner: int, noise_by_learner: np.ndarray, seed: int, codes=CODES):
    """Synthetic out-of-fold predictions: the true code's score is raised by 1, plus noise
    whose size depends on the learner (a noisier learner is harder to detect)."""
    rng = np.random.default_rng(seed)
    learner = np.repeat(np.arange(learners), per_learner)
    truth = rng.choice(codes, learner.size)
    raw = (truth[:, None] == codes[None, :]) + rng.normal(size=(learner.size, len(codes))) * noise_by_learner[learner, None]
    probability = np.exp(raw) / np.exp(raw).sum(axis=1, keepdims=True)
    return learner, truth, codes[probability.argmax(axis=1)], probability


@pytest.mark.parametrize("codes", [CODES, CODES[:2]])
def test_a_resample_is_exactly_the_weighted_figures_of_its_windows(codes) -> None:
    learner, truth, predicted, probability = predictions(12, 20, np.full(12, 0.8), seed=5, codes=codes)
    tables = learner_tables(truth, codes, predicted, probability, learner, 12)
    draw = np.random.default_rng(0).multinomial(12, np.full(12, 1 / 12))            # one learner-cluster resample
    figures = tables.figures(np.arange(12), draw[None, :].astype(float))
    weight = draw[learner]
    # references: scikit-learn's cohen_kappa_score / roc_auc_score / recall_score with sample_weight
    assert figures["kappa"][0] == pytest.approx(cohen_kappa_score(truth, predicted, sample_weight=weight))
    if len(codes) == 2:
        reference = roc_auc_score(truth == codes[1], probability[:, 1], sample_weight=weight)
    else:
        reference = roc_auc_score(truth, probability, multi_class="ovr", average="macro", sample_weight=weight)
    assert figures["auc"][0] == pytest.approx(reference)
    assert figures["recall"][0] == pytest.approx(recall_score(truth, predicted, labels=codes, average=None,
                                                              sample_weight=weight))


def test_group_figures_are_the_groups_own_figures_with_sizes_and_too_small_groups_named() -> None:
    learner, truth, predicted, probability = predictions(13, 20, np.full(13, 0.8), seed=6)
    site = np.where(learner < 6, "north", np.where(learner < 11, "south", "east"))   # east: 2 learners
    baseline = (np.full(truth.size, "focused", dtype=object), np.tile([0.0, 0.0, 1.0], (truth.size, 1)))
    entries = {entry["group"]: entry for entry in group_figures(
        site, learner, truth, CODES, (predicted, probability), {"majority": baseline}, resamples=200, seed=1)}
    assert entries["east"]["too_small"] and "kappa" not in entries["east"] and entries["east"]["learners"] == 2
    north = entries["north"]
    rows = site == "north"
    assert (north["learners"], north["windows"], north["too_small"]) == (6, rows.sum(), False)
    assert north["kappa"]["value"] == pytest.approx(cohen_kappa_score(truth[rows], predicted[rows]))
    assert north["auc"]["value"] == pytest.approx(roc_auc_score(truth[rows], probability[rows], multi_class="ovr"))
    assert north["kappa"]["low"] < north["kappa"]["value"] < north["kappa"]["high"]
    rest = ~rows
    assert north["difference_from_rest"]["kappa"]["value"] == pytest.approx(
        cohen_kappa_score(truth[rows], predicted[rows]) - cohen_kappa_score(truth[rest], predicted[rest]))
    assert north["base_rates"] == pytest.approx({code: float((truth[rows] == code).mean()) for code in CODES})
    assert north["majority_baseline"] == {"kappa": 0.0, "auc": 0.5}
    assert north["coder_agreement"] is None


def test_a_planted_group_difference_is_found_and_a_null_one_rarely() -> None:
    """Planted: the south's windows are much noisier.  Null twin: the same noise everywhere,
    over 25 seeds; a 95 % interval should exclude zero in about 5 % of them (at most 10 % here)."""
    learners, site = 24, np.repeat(["north", "south"], 12)

    def excludes_zero(noise: np.ndarray, seed: int) -> tuple[bool, float]:
        learner, truth, predicted, probability = predictions(learners, 25, noise, seed)
        south = [e for e in group_figures(site[learner], learner, truth, CODES, (predicted, probability), {},
                                          resamples=400, seed=seed) if e["group"] == "south"][0]
        difference = south["difference_from_rest"]["kappa"]
        return difference["high"] < 0 or difference["low"] > 0, difference["value"]

    found, value = excludes_zero(np.where(site == "south", 2.0, 0.6), seed=0)
    assert found and value < -0.2
    false_positives = sum(excludes_zero(np.full(learners, 1.0), seed)[0] for seed in range(1, 26))
    assert false_positives <= 2                                                       # <= 10 % of 25 seeds


def site_flip_data(flip: bool, learners_per_site: int = 8, seed: int = 0, sites=("north", "south")):
    """At the flipped site the same pace means the opposite code (a different way of working)."""
    rng = np.random.default_rng(seed)
    site = np.repeat(sites, learners_per_site * 15)
    learner = np.repeat([f"p-{n}" for n in range(learners_per_site * len(sites))], 15)
    labels = rng.choice(["off_task", "on_task"], site.size)
    sign = np.where((site == sites[-1]) & flip, -1.0, 1.0)
    pace = sign * np.where(labels == "on_task", 1.5, -1.5) + rng.normal(size=site.size)
    return pd.DataFrame({"pace": pace}), pd.Series(labels), learner, pd.Series(site)


def test_transfer_shows_the_drop_when_sites_differ_and_none_when_they_do_not() -> None:
    features, labels, learner, site = site_flip_data(flip=True)
    flipped = transfer_audit(features, labels, learner, site, "logistic", {"model__C": 1.0}, folds=4)
    assert flipped["groups"] == ["north", "south"] and flipped["too_small"] == []
    for cell in flipped["leave_one_group_out"]:
        assert cell["within"]["kappa"] > 0.6 and cell["transfer"]["kappa"] < -0.3 and cell["drop"]["kappa"] > 1.0
        assert cell["training_learners"] == 6                                       # 3/4 of 8 learners, both ways
    assert len(flipped["matrix"]) == 2
    features, labels, learner, site = site_flip_data(flip=False)
    same = transfer_audit(features, labels, learner, site, "logistic", {"model__C": 1.0}, folds=4)
    assert all(abs(cell["drop"]["kappa"]) < 0.15 for cell in same["leave_one_group_out"])


def test_transfer_matrix_covers_every_ordered_pair_of_eligible_groups() -> None:
    features, labels, learner, site = site_flip_data(flip=False, learners_per_site=5, sites=("east", "north", "south"))
    small = site.to_numpy() == "east"
    site = site.mask(small & (learner < "p-2"), "west")                            # west: 2 learners, too few
    result = transfer_audit(features, labels, learner, site, "logistic", {"model__C": 1.0}, folds=3, min_learners=3)
    assert result["groups"] == ["east", "north", "south"] and result["too_small"] == ["west"]
    assert {(cell["train"], cell["test"]) for cell in result["matrix"]} == {
        (a, b) for a in result["groups"] for b in result["groups"] if a != b}
    assert len(result["leave_one_group_out"]) == 3


def test_check_command_audits_by_site_and_across_sites(tmp_path) -> None:
    path, _ = export_file(tmp_path, attributes=("site", "cohort"))  # the roster columns allowed out
    result = call_cli("check", path, "--by", "site", "--transfer", "site", "--dimension", "activity",
                      "--resamples", "200", "--json")
    assert result.returncode == 0, result.stderr
    activity = json.loads(result.stdout)["dimensions"]["activity"]
    assert [group["group"] for group in activity["by"]["site"]] == ["north", "south"]
    assert all(group["learners"] == 5 and group["coder_agreement"]["windows"] > 0 for group in activity["by"]["site"])
    assert activity["transfer"]["groups"] == ["north", "south"]
    assert [route["group"] for route in activity["label_routes"]] == ["agreed or adjudicated", "coders disagreed"]
    too_small = json.loads(call_cli("check", path, "--by", "cohort", "--min-learners", "6", "--dimension", "affect",
                                    "--json").stdout)["dimensions"]["affect"]["by"]["cohort"]
    assert all(group["too_small"] for group in too_small)


def test_check_refuses_attributes_the_export_does_not_carry(tmp_path) -> None:
    path, _ = export_file(tmp_path, attributes=("site", "cohort"))  # the roster columns allowed out
    assert_user_error(call_cli("check", path, "--by", "gender"), "gender", "site, cohort")
    assert_user_error(call_cli("check", path, "--transfer", "log_id"), "log_id", "not an attribute")
    assert_user_error(call_cli("check", path, "--resamples", "10"), "--resamples")


def test_report_is_self_contained_escaped_and_carries_the_caution(tmp_path) -> None:
    import subprocess
    import sys

    from export.audit_report import audit_report
    from tests.conftest import ROOT

    path, _ = export_file(tmp_path, attributes=("site", "cohort"))  # the roster columns allowed out
    report = tmp_path / "audit.html"
    result = call_cli("check", path, "--by", "site", "--transfer", "site", "--dimension", "activity",
                      "--resamples", "200", "--report", report, "--json")
    assert result.returncode == 0, result.stderr
    page = report.read_text(encoding="utf-8")
    assert page.count('src="data:image/png;base64,') == 3                 # reliability, group bars, transfer heatmap
    assert "sole basis" in page and "small samples are uncertain" in page and "http" not in page
    hostile = json.loads(result.stdout.replace("north", "<script>alert(1)</script>"))
    escaped = audit_report(hostile)
    assert "<script>" not in escaped and "&lt;script&gt;alert(1)&lt;/script&gt;" in escaped
    assert_user_error(call_cli("check", path, "--report", tmp_path / "no-such-folder" / "a.html"), "no-such-folder")
    probe = ("import sys, json; from export.audit_report import audit_report; "
             f"audit_report(json.loads(open({str(tmp_path / 'payload.json')!r}).read())); "
             "print('matplotlib.pyplot' in sys.modules)")
    (tmp_path / "payload.json").write_text(result.stdout)
    imported = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                              env={"PYTHONPATH": str(ROOT), "PATH": ""})
    assert imported.stdout.strip() == "False", imported.stderr                # object API only, no pyplot state
