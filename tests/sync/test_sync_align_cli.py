"""``fieldmark align`` through the real command line, on the small demo study (generated
once per module; its truth.json holds the PLANTED clocks) and on the malformed corpus."""
from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from conftest import assert_user_error, run_cli
from demo_sessions.generate import generate_demo
from observer_app.store import Store
from sync.clock import ClockModel

CORPUS = Path(__file__).resolve().parents[1] / "data" / "malformed_logs"


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("align-demo")
    generate_demo(out, 3, "small")
    return out


@pytest.fixture
def study(demo, tmp_path) -> Path:
    """A private copy of the demo study folder (align writes to its store)."""
    return Path(shutil.copytree(demo / "study", tmp_path / "study"))


def stored_models(study: Path) -> dict[str, ClockModel]:
    with Store(study / "observations.sqlite") as store:
        rows = store.clock_models()
    return {device: ClockModel.from_json(text) for device, text in zip(rows["device"], rows["model_json"])}


def test_align_json_recovers_the_planted_clocks_from_sync_marks(demo, study):
    result = run_cli("align", study, "--json")
    assert result.returncode == 0, result.stderr
    payload = json.loads(result.stdout)  # exactly one JSON object
    truth = json.loads((demo / "truth.json").read_text())["devices"]
    assert set(payload["devices"]) == set(truth)
    for device, planted in truth.items():
        got = payload["devices"][device]
        assert got["method"] == "marks" and got["marks_used"] >= 3
        # PLANTED: device = log + offset + drift * (log - reference); compare at the model's reference.
        at_reference = planted["offset_s"] + planted["drift_ppm"] * 1e-6 * (
            got["reference_ns"] - pd.Timestamp(planted["reference"]).value) / 1e9
        assert abs(got["offset_s"] - at_reference) <= 1.0
        assert abs(got["drift_ppm"] - planted["drift_ppm"]) <= 10.0
    assert sum(payload["logs"]["rows_per_file"].values()) == json.loads((demo / "truth.json").read_text())["counts"]["events"]
    models = stored_models(study)
    assert {device: model.method for device, model in models.items()} == {d: "marks" for d in truth}


def test_align_table_and_hand_set_offset(study):
    result = run_cli("align", study, "--method", "auto", "--set-offset", "laptop-b=1.5")
    assert result.returncode == 0, result.stderr
    assert re.search(r"laptop-b\s+manual\s+\+1\.500", result.stdout)
    assert re.search(r"laptop-a\s+auto\s+", result.stdout)
    models = stored_models(study)
    assert models["laptop-b"].method == "manual" and models["laptop-b"].offset_s == 1.5
    assert models["laptop-a"].method == "auto" and len(models["laptop-a"].scan_scores) == 1201


def test_bad_set_offset_is_one_line(study):
    assert_user_error(run_cli("align", study, "--set-offset", "laptop-b=soon"), "--set-offset", "laptop-b=soon")


def replace_logs(study: Path, entry: str) -> None:
    """study.toml with its [[logs]] entries replaced by ``entry``."""
    path = study / "study.toml"
    text = path.read_text()
    path.write_text(text[: text.index("[[logs]]")] + entry)


@pytest.mark.parametrize(("name", "log_format", "needle"), [
    # One file per reader; read_logs meets the whole corpus in test_sync_malformed_logs.py.
    ("bad_time.csv", "csv", "column timestamp, row 3"),
    ("malformed_line3.jsonl", "xapi", "line 3"),
    ("not_parquet.parquet", "parquet", "not a readable Parquet file"),
])
def test_malformed_log_via_the_command_line(study, name, log_format, needle):
    entry = f'[[logs]]\npath = "{CORPUS / name}"\nformat = "{log_format}"\n'
    if log_format != "xapi":
        entry += '[logs.columns]\nlearner = "trainee"\ntime = "timestamp"\naction = "event"\n'
    replace_logs(study, entry)
    result = run_cli("align", study)
    assert_user_error(result, name, needle)
    assert stored_models(study) == {}  # nothing half-written


def test_bad_logs_entry_via_the_command_line(study):
    replace_logs(study, '[[logs]]\npath = "logs/centre_north.csv"\nformat = "csv"\ncolour = "red"\n')
    assert_user_error(run_cli("align", study), "study.toml", "[[logs]] #1 key colour")
