"""`fieldmark export` on the demo study: DuckDB agrees on the features, no raw ids, sklearn-ready."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import GroupKFold

import export
from demo_sessions.generate import generate_demo
from export.pseudonyms import pseudonym
from export.writer import manifest_path
from observer_app.cli import main
from observer_app.study.folder import load_study
from sync.logs import read_logs
from tests.conftest import assert_user_error, run_cli


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """The small demo study, with its clocks aligned (the step before export)."""
    out = tmp_path_factory.mktemp("demo")
    generate_demo(out, seed=3, size="small")
    assert main(["align", str(out / "study"), "--json"]) == 0
    return out / "study"


@pytest.fixture(scope="module")
def exported(study, tmp_path_factory):
    """The real command line, run once as a user would, default options."""
    out = tmp_path_factory.mktemp("export") / "windows.parquet"
    result = run_cli("export", study, "--out", out, "--json")
    assert result.returncode == 0, result.stderr
    return out, json.loads(result.stdout)


def test_export_writes_windows_and_a_manifest(study, exported) -> None:
    path, summary = exported
    manifest = json.loads(manifest_path(path).read_text())
    assert summary["rows"] == manifest["rows"] == len(pd.read_parquet(path)) > 0
    assert manifest["scheme_hash"] == load_study(study).scheme.content_hash
    log = study / "logs" / "centre_north.csv"
    assert manifest["inputs"]["logs/centre_north.csv"] == "sha256:" + hashlib.sha256(log.read_bytes()).hexdigest()
    key = (study / "secret.key").read_bytes()  # device names leave the study only as pseudonyms
    assert {model["device"] for model in manifest["clock_models"]} == {pseudonym(d, key) for d in ("laptop-a", "laptop-b")}
    assert manifest["parameters"]["policy"] == "first-coder"
    assert summary["warnings"] == []


def test_exported_file_has_no_raw_identifier(study, exported) -> None:
    path, _ = exported
    roster = load_study(study).roster
    data = path.read_bytes() + manifest_path(path).read_bytes()
    table = pd.read_parquet(path)
    cells = {str(cell) for cell in table.to_numpy().ravel()}
    for identifier in list(roster["learner"]) + list(roster["log_id"]) + list(roster["label"]):
        assert identifier.encode() not in data, identifier
        assert not any(identifier in cell for cell in cells), identifier
    assert table["learner"].str.startswith("p-").all()


def test_exported_windows_load_straight_into_grouped_cross_validation(exported) -> None:
    path, _ = exported
    features, labels, groups = export.load_windows(path, "activity")
    assert len(features) == len(labels) == len(groups) > 0
    for train, test in GroupKFold(n_splits=4).split(features, labels, groups):
        assert not set(groups.iloc[train]) & set(groups.iloc[test])


def test_exported_features_match_duckdb_on_the_same_windows(study, tmp_path, capsys) -> None:
    out = tmp_path / "windows.parquet"
    assert main(["export", str(study), "--out", str(out), "--keep-ids", "--help-actions",
                 "help_request,http://adlnet.gov/expapi/verbs/asked", "--json"]) == 0
    capsys.readouterr()
    table = pd.read_parquet(out)
    loaded = load_study(study)
    events, _ = read_logs(loaded.logs)
    connection = duckdb.connect()
    connection.register("events", events.astype({"learner": str, "outcome": str, "action": str}))
    connection.register("windows", table[["window_id", "log_id", "start_ns", "end_ns"]])
    reference = connection.execute("""
        SELECT w.window_id, count(e.time_ns) AS events,
               count(*) FILTER (WHERE e.outcome = 'incorrect') AS errors,
               count(*) FILTER (WHERE e.outcome IN ('correct', 'incorrect')) AS attempts,
               count(*) FILTER (WHERE e.action IN ('help_request', 'http://adlnet.gov/expapi/verbs/asked')) AS help
        FROM windows w LEFT JOIN events e
          ON e.learner = w.log_id AND e.time_ns >= w.start_ns AND e.time_ns < w.end_ns
        GROUP BY w.window_id""").df().set_index("window_id").loc[table["window_id"]]
    np.testing.assert_array_equal(table["event_count"].to_numpy(), reference["events"].to_numpy())
    np.testing.assert_array_equal(table["help_requests"].to_numpy(), reference["help"].to_numpy())
    attempts = reference["attempts"].to_numpy(float)
    expected = np.where(attempts > 0, reference["errors"].to_numpy(float) / np.where(attempts > 0, attempts, 1), np.nan)
    np.testing.assert_allclose(table["error_rate"].to_numpy(), expected, equal_nan=True)
    assert table["help_requests"].sum() > 0 and table["event_count"].sum() > 0


def test_export_csv_and_agreed_only_labels(study, exported, tmp_path, capsys) -> None:
    out = tmp_path / "windows.csv"
    assert main(["export", str(study), "--out", str(out), "--labels", "agreed-only", "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["format"] == "csv"
    table = pd.read_csv(out)
    sources = set(table["label_source_activity"].dropna()) | set(table["label_source_affect"].dropna())
    assert not sources & {"first-coder", "majority"}
    earlier = pd.read_parquet(exported[0])                                           # another run, same key
    assert set(table["learner"]) <= set(earlier["learner"])                          # the same pseudonyms
    assert set(table["window_id"]) <= set(earlier["window_id"])


def test_export_rejects_bad_input_with_one_line_and_writes_nothing(study, tmp_path, capsys) -> None:
    out = tmp_path / "windows.parquet"
    assert_user_error(run_cli("export", study, "--out", out, "--before", "-5"), "--before")
    for arguments, needle in (
        (["--anchor", "coded"], "--before/--after"),                # a window of no length around the code
        (["--top-actions", "-1"], "--top-actions"),
    ):
        assert main(["export", str(study), "--out", str(out), *arguments]) == 2       # in-process: same entry point
        lines = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
        assert len(lines) == 1 and needle in lines[0] and "Traceback" not in lines[0]
    assert main(["export", str(tmp_path / "nowhere"), "--out", str(out)]) == 2
    assert "nowhere" in capsys.readouterr().err
    assert main(["export", str(study), "--out", str(tmp_path / "missing" / "w.parquet")]) == 2
    assert "folder does not exist" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_export_without_the_secret_key_asks_for_it_or_for_keep_ids(study, tmp_path, capsys) -> None:
    key = study / "secret.key"
    saved = key.read_bytes()
    key.unlink()
    try:
        assert main(["export", str(study), "--out", str(tmp_path / "w.parquet")]) == 2
        assert "secret key missing" in capsys.readouterr().err
    finally:
        key.write_bytes(saved)
        key.chmod(0o600)
    assert not (tmp_path / "w.parquet").exists()


def test_demo_runs_the_export_and_check_steps(tmp_path) -> None:
    from demo_sessions.pipeline import run_demo

    summary = run_demo(tmp_path / "demo", seed=5, size="small", progress=False)
    assert [step["name"] for step in summary["steps"]][-2:] == ["export", "check"]
    table = pd.read_parquet(summary["windows"]["path"])
    assert summary["windows"]["written"] == len(table) > 0
    assert set(summary["detector"]) == {"activity", "affect"}
    activity = summary["detector"]["activity"]
    assert activity["learners"] == table["group"].nunique()
    assert activity["majority_baseline"]["auc"] == pytest.approx(0.5)


def test_export_hashes_each_log_once(study, tmp_path, monkeypatch, capsys) -> None:
    """The log cache's digest is the manifest's: a large log is read for hashing once, not twice."""
    opened: list[str] = []
    real = hashlib.file_digest

    def counting(handle, digest):
        opened.append(handle.name)
        return real(handle, digest)

    def whole_file(path) -> str:
        with open(path, "rb") as handle:
            return counting(handle, "sha256").hexdigest()

    monkeypatch.setattr(hashlib, "file_digest", counting)
    monkeypatch.setattr(export.writer, "file_sha256", whole_file)
    out = tmp_path / "windows.parquet"
    assert main(["export", str(study), "--out", str(out), "--json"]) == 0
    log = study / "logs" / "centre_north.csv"
    assert [Path(name).resolve() for name in opened].count(log.resolve()) == 1
    manifest = json.loads(manifest_path(out).read_text())
    # Outside reference: hashlib over the file's bytes.
    assert manifest["inputs"]["logs/centre_north.csv"] == "sha256:" + hashlib.sha256(log.read_bytes()).hexdigest()
