"""Issue 11, 3(b): a clock off by hours, found by the automatic scan's gross stage and
named, through the real entry points: ``fieldmark import`` of a CSV (``--offsets-as-written``: import refuses it otherwise), then ``fieldmark
align --json``.

The study is built here from tests/sync/sync_planted_clock.py (two 4-hour days of
simulated log and coded windows, codes drawn from the simulated states, so the truth
is known).  Its windows are written to a CSV as a coder's tablet would have them, with
PLANTED mistakes:
  tablet-c  clock 4 s ahead, local (Berlin) wall times written with +00:00 where
            +01:00 was meant (a wrong UTC offset): +3600 s + 4 s;
  tablet-d  clock 9 s behind, local times written with +03:00 where +01:00 was meant:
            -7200 s - 9 s.
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sync_planted_clock as planted_clock
from tests.conftest import assert_user_error, call_cli
from demo_sessions.generate import generate_demo
from observer_app.pipeline.alignment import stored_clock_models
from observer_app.study.folder import load_study
from sync.clock import ClockModel
from sync.clock_gross import QUARTER_HOUR_S, gross_mistake

DAYS_USED = 2
# PLANTED: (device, coder, clock error s, UTC offset written, UTC offset meant) -> offset = meant - written + error.
PLANTED = (("tablet-c", "coder_c", 4.0, "+00:00", 3600.0), ("tablet-d", "coder_d", -9.0, "+03:00", -7200.0))
BERLIN_WINTER = pd.Timedelta(hours=1)  # March 2026 before the change: Europe/Berlin is UTC+01:00 (IANA tzdata)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """A study folder holding the planted log; the demo lends its scheme, settings and key."""
    root = tmp_path_factory.mktemp("gross")
    generate_demo(root / "demo", 1, "small")
    folder = root / "study"
    folder.mkdir()
    for name in ("scheme.toml", "secret.key"):
        shutil.copy(root / "demo" / "study" / name, folder / name)
    planted = planted_clock.build(seed=7)
    last = planted_clock.REFERENCE + pd.Timedelta(days=DAYS_USED)
    events = planted.events[planted.events["time_ns"] < last.value]
    (folder / "logs").mkdir()
    pd.DataFrame({"trainee": events["learner"].astype(str),
                  "at": pd.to_datetime(events["time_ns"], utc=True).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ"),
                  "event": events["action"].astype(str)}).to_csv(folder / "logs" / "bench.csv", index=False)
    settings = (root / "demo" / "study" / "study.toml").read_text().split("[[logs]]")[0]
    (folder / "study.toml").write_text(settings + '[[logs]]\npath = "logs/bench.csv"\nformat = "csv"\n'
                                       '[logs.columns]\nlearner = "trainee"\ntime = "at"\naction = "event"\n')
    roster = planted.roster.assign(label=lambda r: "Bench " + r["learner"], site="north", cohort="A")
    roster[["learner", "label", "log_id", "site", "cohort"]].to_csv(folder / "roster.csv", index=False)
    # The coded windows back on the log clock (the planted device clock taken out).
    windows = planted.observations
    start = planted_clock.TRUTH.to_log_ns(windows["window_start"].astype("int64").to_numpy())
    end = planted_clock.TRUTH.to_log_ns(windows["window_end"].astype("int64").to_numpy())
    kept = end < last.value
    rows = []
    for number, (device, coder, error_s, written, _) in enumerate(PLANTED):
        mine = kept & (np.arange(len(windows)) % len(PLANTED) == number)  # each tablet codes every other window
        local = {name: pd.to_datetime(ns[mine] + int(error_s * 1e9), utc=True).tz_localize(None) + BERLIN_WINTER
                 for name, ns in (("time", start), ("end", end))}
        rows.append(pd.DataFrame({
            "coder": coder, "device": device, "learner": windows["learner"][mine].to_numpy(),
            **{name: value.strftime("%Y-%m-%dT%H:%M:%S.%f").str[:-3] + written for name, value in local.items()},
            "activity": windows["activity"][mine].to_numpy(), "affect": windows["affect"][mine].to_numpy()}))
    pd.concat(rows).to_csv(root / "tablets.csv", index=False)
    # The first defence: +03:00 is no offset Europe/Berlin had in March (IANA tzdata), so import
    # refuses the file.  The scan is the second, for a lab that insists (or wrote +00:00).
    assert_user_error(call_cli("import", folder, root / "tablets.csv"), "UTC+03:00", "coder coder_d")
    result = call_cli("import", folder, root / "tablets.csv", "--offsets-as-written")
    assert result.returncode == 0, result.stderr
    return folder


def test_align_finds_and_names_a_clock_off_by_hours(study):
    result = call_cli("align", study, "--json")
    assert result.returncode == 0, result.stderr
    devices = json.loads(result.stdout)["devices"]
    models = stored_clock_models(load_study(study))
    for device, _, error_s, _, utc_mistake_s in PLANTED:
        planted = utc_mistake_s + error_s
        got = devices[device]
        assert got["method"] == "auto"
        model: ClockModel = models[device]
        # The planted clock has no drift: its offset is the same at every reference.
        assert abs(got["offset_s"] - planted) <= max(3 * model.span_standard_error_s, 1.0), (device, got)
        assert model.span_standard_error_s < 2.0  # evidence enough for the default uncertainty bound
        hours = int(abs(utc_mistake_s) // 3600)
        way = "ahead" if planted > 0 else "behind"
        named = [w for w in got["warnings"] if "looks like a clock set" in w]
        assert len(named) == 1, got["warnings"]
        assert f"set {hours} hour{'s' if hours > 1 else ''} {way} by hand" in named[0]
        assert "wrong UTC offset in imported times" in named[0]


def test_a_clock_near_the_log_is_not_called_a_mistake():
    # Quarter hours are the zones' granularity (IANA tzdata has +05:45, +09:30, +12:45).
    assert gross_mistake(42.7) is None and gross_mistake(-95.0) is None and gross_mistake(400.0) is None
    assert "1 hour ahead" in gross_mistake(3604.0)
    assert "2 hours behind" in gross_mistake(-7209.0)
    assert "30 minutes" in gross_mistake(1800.0 + 3.0)
    assert "15 or 45 minutes" in gross_mistake(-(5 * QUARTER_HOUR_S) - 2.0)
    assert "far more than a clock drifts" in gross_mistake(1250.0)


def test_a_hand_set_offset_an_hour_off_is_kept_and_questioned(study, tmp_path):
    """The lab types tablet-c's seconds (4 s) but forgets its hour: the hand-set offset is a
    person's decision and stays in effect; align adds the scan's second opinion (planted truth:
    +3604 s, so the scan differs by about +3600 s and names the hour)."""
    folder = tmp_path / "study"
    shutil.copytree(study, folder)
    result = call_cli("align", folder, "--json", "--set-offset", "tablet-c=4", "--set-offset", "tablet-d=-7209")
    assert result.returncode == 0, result.stderr
    decisions = json.loads(result.stdout)["decisions"]
    opinion = decisions["tablet-c"]["second_opinion"]
    assert opinion is not None and abs(opinion["difference_s"] - 3600.0) <= max(3 * opinion["standard_error_s"], 1.0)
    assert "1 hour ahead" in opinion["looks_like"]
    assert decisions["tablet-d"]["second_opinion"] is None  # typed right: the scan agrees, nothing to say
    models = stored_clock_models(load_study(folder))
    assert models["tablet-c"].method == "manual" and models["tablet-c"].offset_s == 4.0  # never replaced
    shown = call_cli("align", folder)
    assert shown.returncode == 0, shown.stderr
    assert "warning: tablet-c: the automatic scan puts this clock at +360" in shown.stdout
    assert "the hand-set offset stays" in shown.stdout and "tablet-d: the automatic scan" not in shown.stdout
