"""A paired run whose laptops' clocks differ: `fieldmark agree` pairs its slots only when
the two windows overlap on the log's clock, and says how many it left unpaired."""
from __future__ import annotations

import json
from datetime import timedelta
from pathlib import Path

import pandas as pd

from observer_app.study.folder import load_study
from observer_app.study.store import Store
from tests.conftest import call_cli
from tests.export.small_studies import LEARNERS, LOG_IDS, write_log

TYPED_START = pd.Timestamp("2026-03-03T08:00:00Z").to_pydatetime()  # both coders typed 09:00 Berlin


def paired_run_study(tmp_path: Path) -> Path:
    """ann (laptop-a) and ben (laptop-b) start slot 0 when their own clocks read the typed start."""
    study = tmp_path / "study"
    assert call_cli("init", study).returncode == 0
    write_log(study, LOG_IDS)
    loaded = load_study(study)
    with Store(loaded.store_path) as store:
        for coder, device in (("ann", "laptop-a"), ("ben", "laptop-b")):
            session = store.start_session(coder=coder, device=device, mode="live", started_at=TYPED_START,
                                          monotonic_start=0.0, window_seconds=20, order="fixed", seed=1,
                                          scheme_hash=loaded.scheme.content_hash, paired_start=TYPED_START)
            for slot, learner in enumerate(LEARNERS):
                start = TYPED_START + timedelta(seconds=20 * slot)
                store.record_observation(session_id=session, learner=learner, window_start=start,
                                         window_end=start + timedelta(seconds=20), coded_at=start + timedelta(seconds=15),
                                         codes={"activity": "on_task"}, scheme_hash=loaded.scheme.content_hash, slot=slot)
    return study


def pairing_after(study: Path, ben_offset_s: float) -> dict:
    assert call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", f"laptop-b={ben_offset_s}").returncode == 0
    result = call_cli("agree", study, "--json", "--resamples", "20")
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout)["pairing"]


def test_a_paired_run_28_s_apart_on_the_log_clock_is_not_paired_and_agree_says_so(tmp_path: Path) -> None:
    study = paired_run_study(tmp_path)
    pairing = pairing_after(study, 28.0)  # ben's laptop 28 s ahead: his windows are 28 s earlier on the log
    assert pairing["units"] == 0 and pairing["paired_run_not_overlapping"] == 2 * len(LEARNERS)
    text = call_cli("agree", study, "--resamples", "20").stdout
    assert f"{2 * len(LEARNERS)} observations of paired runs left unpaired" in text


def test_a_paired_run_whose_clocks_agree_within_the_window_pairs_by_slot(tmp_path: Path) -> None:
    study = paired_run_study(tmp_path)
    pairing = pairing_after(study, 0.4)
    assert pairing["units"] == len(LEARNERS) and pairing["units_by_method"] == {"slot": len(LEARNERS)}
    assert pairing["paired_run_not_overlapping"] == 0
