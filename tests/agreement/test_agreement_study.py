"""`fieldmark agree STUDY`, `--disagreements`, `--report` and `fieldmark adjudicate` on a real study folder."""
from __future__ import annotations

import base64
import json
import re
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from observer_app.study.store import Store
from tests.conftest import assert_user_error, call_cli, run_cli

START = datetime(2026, 3, 2, 8, 0, tzinfo=timezone.utc)
ACTIVITY = ("on_task", "task_discussion", "off_task", "rapid_guessing", "away")


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """A template study with a paired run of two coders: 12 learners x 10 rounds, 20 s windows.

    Ben's activity code differs from Ann's on a fixed, known set of windows; affect is
    always agreed except where Ann could not tell ("unclear").
    """
    folder = tmp_path_factory.mktemp("agree") / "study"
    assert call_cli("init", folder).returncode == 0
    generator = np.random.default_rng(7)
    with Store(folder / "observations.sqlite") as store:
        sessions = {
            coder: store.start_session(coder=coder, device=f"laptop-{coder}", mode="live", started_at=START,
                                       monotonic_start=0.0, window_seconds=20, order="fixed", seed=1,
                                       scheme_hash="test", paired_start=START)
            for coder in ("ann", "ben")
        }
        for round_number in range(10):
            for index in range(12):
                slot = round_number * 12 + index
                start = START + timedelta(seconds=20 * slot)
                truth = ACTIVITY[generator.integers(0, 5)]
                ben_code = ACTIVITY[(ACTIVITY.index(truth) + 1) % 5] if slot % 6 == 0 else truth
                affect_ann = "unclear" if slot % 10 == 3 else "focused"
                for coder, code, affect, note in (("ann", truth, affect_ann, "glare on the screen" if slot % 6 == 0 else ""),
                                                  ("ben", ben_code, "focused", "")):
                    store.record_observation(
                        session_id=sessions[coder], learner=f"L{index + 1:02d}", window_start=start,
                        window_end=start + timedelta(seconds=20), coded_at=start + timedelta(seconds=19),
                        codes={"activity": code, "affect": affect}, scheme_hash="test", slot=slot, note=note)
    # both laptops' clocks were synchronised with the log server: the lab says so
    assert call_cli("align", folder, "--set-offset", "laptop-ann=0", "--set-offset", "laptop-ben=0").returncode == 0
    return folder


def study_codes(study: Path) -> pd.DataFrame:
    with Store(study / "observations.sqlite") as store:
        view = store.observations(["activity", "affect"])
    return view.pivot(index="slot", columns="coder", values="activity")


def test_study_figures_match_scikit_learn(study):
    result = run_cli("agree", study, "--json", "--resamples", "300")
    assert result.returncode == 0, result.stderr
    document = json.loads(result.stdout)
    assert document["pairing"]["units"] == 120 and document["pairing"]["unmatched"] == 0
    assert document["clusters"] == 12
    codes = study_codes(study)
    # Reference: sklearn cohen_kappa_score on the two coders' codes of the same slots.
    expected = cohen_kappa_score(codes["ann"], codes["ben"])
    activity = document["dimensions"]["activity"]
    assert activity["cohen_kappa"]["value"] == pytest.approx(expected, abs=1e-12)
    assert activity["cohen_kappa"]["low"] <= expected <= activity["cohen_kappa"]["high"]
    assert activity["percent_agreement"]["value"] == pytest.approx(100 / 120)
    # Affect: the 12 "unclear" windows are left out and reported apart.
    affect = document["dimensions"]["affect"]
    assert affect["units"] == 108
    assert affect["could_not_observe"] == {"code": "unclear", "included": False, "codes": 12,
                                           "units_one_coder_could_not": 12}


def test_could_not_observe_included_on_request(study):
    result = call_cli("agree", study, "--json", "--include-could-not-observe", "--resamples", "50")
    affect = json.loads(result.stdout)["dimensions"]["affect"]
    assert affect["units"] == 120 and "unclear" in affect["codes"]
    assert affect["could_not_observe"]["included"] is True
    assert affect["percent_agreement"]["value"] == pytest.approx(108 / 120)


def test_human_table_names_every_dimension(study):
    result = call_cli("agree", study, "--resamples", "100")
    assert result.returncode == 0, result.stderr
    assert "activity (nominal, 120 units)" in result.stdout and "affect (nominal, 108 units)" in result.stdout
    assert "Cohen's kappa" in result.stdout and "Pairing: 240 observations, 120 units, 0 unmatched" in result.stdout


def test_disagreements_then_adjudication_round_trip(study, tmp_path):
    listing = tmp_path / "disagreements.csv"
    result = call_cli("agree", study, "--disagreements", listing, "--resamples", "50")
    assert result.returncode == 0, result.stderr
    table = pd.read_csv(listing, keep_default_na=False)
    # Ben differs on every sixth slot (20 of 120) for activity; affect differs where Ann said "unclear".
    assert (table["dimension"] == "activity").sum() == 20
    assert (table["dimension"] == "affect").sum() == 12
    assert set(table.loc[table["dimension"] == "activity", "notes"]) == {"glare on the screen"}
    assert (table["adjudicated_code"] == "").all()

    first = table[table["dimension"] == "activity"].iloc[0]
    decisions = tmp_path / "decisions.csv"
    decisions.write_text("unit,dimension,code,adjudicator,reason\n"
                         f"{first['unit']},activity,{first['code_b']},lead,replayed the clip\n")
    recorded = run_cli("adjudicate", study, decisions)
    assert recorded.returncode == 0, recorded.stderr
    with Store(study / "observations.sqlite") as store:
        stored = store.adjudications()
    assert list(stored["unit"]) == [first["unit"]] and stored["code"].iloc[0] == first["code_b"]

    again = call_cli("agree", study, "--disagreements", listing, "--resamples", "50", "--force")
    assert again.returncode == 0
    table = pd.read_csv(listing, keep_default_na=False).set_index(["unit", "dimension"])
    assert table.loc[(first["unit"], "activity"), "adjudicated_code"] == first["code_b"]


def test_adjudication_file_is_checked_before_anything_is_stored(study, tmp_path):
    with Store(study / "observations.sqlite") as store:
        before = len(store.adjudications())
    bad_unit = tmp_path / "bad_unit.csv"
    bad_unit.write_text("unit,dimension,code,adjudicator,reason\nnot-a-unit,activity,away,lead,\n")
    assert_user_error(call_cli("adjudicate", study, bad_unit), "bad_unit.csv", "row 2", "unknown unit")
    listing = tmp_path / "d.csv"
    call_cli("agree", study, "--disagreements", listing, "--resamples", "10")
    unit = pd.read_csv(listing)["unit"].iloc[0]
    bad_code = tmp_path / "bad_code.csv"
    bad_code.write_text("unit,dimension,code,adjudicator,reason\n"
                        f"{unit},activity,away,lead,\n{unit},activity,dancing,lead,\n")
    assert_user_error(call_cli("adjudicate", study, bad_code), "row 3", "dancing")
    with Store(study / "observations.sqlite") as store:
        assert len(store.adjudications()) == before


def test_report_is_self_contained_html_with_plots(study, tmp_path):
    report = tmp_path / "reliability.html"
    result = run_cli("agree", study, "--report", report, "--by", "pair", "--resamples", "200",
                     "--rolling-window", "30")
    assert result.returncode == 0, result.stderr
    text = report.read_text()
    images = re.findall(r"src=[\"']data:image/png;base64,([A-Za-z0-9+/=]+)[\"']", text)
    assert len(images) == 3  # one confusion heatmap per dimension + the drift plot
    for image in images:
        assert base64.b64decode(image).startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (ISO/IEC 15948)
    outside_images = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", text)  # base64 may spell anything
    assert "http" not in outside_images.lower().replace("http-equiv", "")
    assert "ann + ben" in text
    assert [p.name for p in tmp_path.iterdir()] == ["reliability.html"]


def test_by_pair_and_certification(study):
    result = call_cli("agree", study, "--json", "--by", "pair", "--certify", "ann", "--certify-pairs", "100",
                      "--resamples", "100")
    assert result.returncode == 0, result.stderr
    document = json.loads(result.stdout)
    assert [entry["pair"] for entry in document["by"]] == ["ann + ben"]
    ben = document["certification"]["ben"]
    # activity: 120 pairs, kappa about 0.79 (>= 0.6) passes; affect: 108 pairs, single
    # category after leaving out "unclear", kappa undefined -> fails.
    assert ben["dimensions"]["activity"]["passes"] is True
    assert ben["dimensions"]["affect"]["passes"] is False
    assert ben["certified"] is False
    stricter = json.loads(call_cli("agree", study, "--json", "--certify", "ann", "--certify-pairs", "121",
                                   "--resamples", "10").stdout)
    assert stricter["certification"]["ben"]["dimensions"]["activity"]["passes"] is False


def test_level_option_is_refused_for_a_study(study):
    assert_user_error(call_cli("agree", study, "--level", "ordinal"), "--level")


def test_time_pairing_uses_the_logs_clock_once_devices_are_aligned(tmp_path):
    """Solo sessions on two laptops, ben's clock 30 s ahead: pairs by time only after alignment."""
    from sync.clock import manual_model

    folder = tmp_path / "solo"
    assert call_cli("init", folder).returncode == 0
    with Store(folder / "observations.sqlite") as store:
        for coder, offset in (("ann", 0), ("ben", 30)):
            session = store.start_session(coder=coder, device=f"laptop-{coder}", mode="live", started_at=START,
                                          monotonic_start=0.0, window_seconds=20, order="fixed", seed=1,
                                          scheme_hash="test")
            for index in range(12):
                start = START + timedelta(seconds=20 * index + offset)
                store.record_observation(session_id=session, learner=f"L{index + 1:02d}", window_start=start,
                                         window_end=start + timedelta(seconds=20),
                                         coded_at=start + timedelta(seconds=19),
                                         codes={"activity": ACTIVITY[index % 5], "affect": "focused"},
                                         scheme_hash="test")
    # no clock decision yet: agree refuses rather than pair on each laptop's own clock
    assert_user_error(call_cli("agree", folder, "--json", "--resamples", "20"), "laptop-ann", "--set-offset laptop-ann=0")
    with Store(folder / "observations.sqlite") as store:
        for coder, offset in (("ann", 0.0), ("ben", 30.0)):
            # sync.clock convention: device time = log time + offset_s
            store.record_clock_model(f"laptop-{coder}", manual_model(f"laptop-{coder}", offset).to_json(), START)
    after = json.loads(call_cli("agree", folder, "--json", "--resamples", "20").stdout)
    assert after["pairing"]["units"] == 12 and after["pairing"]["clock"] == "log"
    assert after["dimensions"]["activity"]["percent_agreement"]["value"] == 1.0


def test_report_escapes_every_name_it_shows(tmp_path):
    """Coder, dimension and code names are the lab's own text: the report must show them,
    never run them (HTML5 section 13.1.2: '<' in text starts a tag unless escaped)."""
    rows = ["unit,coder,<b>mood</b>"]
    rows += [f"u{unit},{coder},{'<script>x</script>' if (unit + (coder == 'ann')) % 3 else 'calm'}"
             for unit in range(12) for coder in ("ann", "<img src=x onerror=alert(1)>")]
    source = tmp_path / "coded.csv"
    source.write_text("\n".join(rows) + "\n", encoding="utf-8")
    report = tmp_path / "reliability.html"
    result = call_cli("agree", source, "--report", report, "--resamples", "50")
    assert result.returncode == 0, result.stderr
    text = report.read_text()
    assert "<script>" not in text and "<img src=x" not in text and "<b>mood" not in text
    assert "&lt;script&gt;x&lt;/script&gt;" in text and "&lt;b&gt;mood&lt;/b&gt;" in text
