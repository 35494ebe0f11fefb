"""``fieldmark align`` through the real command line, on the small demo study (generated
once per module; its truth.json holds the PLANTED clocks) and on the malformed corpus."""
from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from tests.conftest import assert_user_error, call_cli, run_cli
from demo_sessions.generate import generate_demo
from observer_app.pipeline.alignment import stored_clock_models
from observer_app.study.folder import load_study
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
    return stored_clock_models(load_study(study))


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
    # the small demo's automatic fit is above the 2 s bound: stored only when accepted
    result = call_cli("align", study, "--method", "auto", "--set-offset", "laptop-b=1.5", "--accept-uncertain")
    assert result.returncode == 0, result.stderr
    assert re.search(r"laptop-b\s+manual\s+\+1\.500", result.stdout)
    assert re.search(r"laptop-a\s+auto\s+", result.stdout)
    models = stored_models(study)
    assert models["laptop-b"].method == "manual" and models["laptop-b"].offset_s == 1.5
    assert models["laptop-a"].method == "auto" and len(models["laptop-a"].scan_scores) == 1201


@pytest.mark.parametrize(("option", "needle"), [("laptop-b=soon", "laptop-b=soon"), ("laptop-q=2", "laptop-q")])
def test_bad_set_offset_is_one_line(study, option, needle):
    assert_user_error(call_cli("align", study, "--set-offset", option), "--set-offset", needle)


def replace_logs(study: Path, entry: str) -> None:
    """study.toml with its [[logs]] entries replaced by ``entry``."""
    path = study / "study.toml"
    text = path.read_text()
    path.write_text(text[: text.index("[[logs]]")] + entry)


@pytest.mark.parametrize(("name", "log_format", "needle"), [
    ("bad_time.csv", "csv", "column timestamp, row 3"),
    ("missing_column.csv", "csv", "time = 'timestamp'"),
    ("not_utf8.csv", "csv", "encoding"),
    ("malformed_line3.jsonl", "xapi", "line 3"),
    ("malformed_array_line7.json", "xapi", "line 7"),
    ("empty.jsonl", "xapi", "is empty"),
    ("duration_in_months.jsonl", "xapi", "months"),
    ("not_parquet.parquet", "parquet", "not a readable Parquet file"),
])
def test_malformed_log_via_the_command_line(study, name, log_format, needle):
    entry = f'[[logs]]\npath = "{CORPUS / name}"\nformat = "{log_format}"\n'
    if log_format != "xapi":
        entry += '[logs.columns]\nlearner = "trainee"\ntime = "timestamp"\naction = "event"\n'
    replace_logs(study, entry)
    # In-process (call_cli) for speed; the subprocess path is covered by the JSON test above.
    assert_user_error(call_cli("align", study), name, needle)
    assert stored_models(study) == {}  # nothing half-written


def test_bad_logs_entry_via_the_command_line(study):
    replace_logs(study, '[[logs]]\npath = "logs/centre_north.csv"\nformat = "csv"\ncolour = "red"\n')
    assert_user_error(run_cli("align", study), "study.toml", "[[logs]] #1 key colour")


def test_align_step_of_the_demo_pipeline_fills_recovered_clocks(tmp_path):
    """`fieldmark demo` runs align: "recovered" is stated at the planted reference, so it
    compares directly with the generator's "truth" (PLANTED) in the summary."""
    from demo_sessions.pipeline import STEPS, DemoRun, step_align, step_generate
    assert [name for name, _ in STEPS].index("align") > [name for name, _ in STEPS].index("generate")
    run = DemoRun(out=tmp_path / "demo", seed=4, size="small")
    run.summary = {"devices": {}}
    step_generate(run)
    step_align(run)
    for device, figures in run.summary["devices"].items():
        truth, recovered = figures["truth"], figures["recovered"]
        assert abs(recovered["offset_s"] - truth["offset_s"]) <= 1.0
        assert abs(recovered["drift_ppm"] - truth["drift_ppm"]) <= 10.0
    assert "Clocks" in run.sections[-1] and "data:image/png;base64," in run.sections[-1]
