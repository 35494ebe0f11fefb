"""The planted truth is what the demo promises, checked from the written files alone.

Logs are read back here independently of fieldmark's readers (pandas for the CSV, the
json module for the xAPI lines), naive local times are placed in their zone with
zoneinfo, and the clock formula is the one documented in truth.json / sync/tables.py.
"""
from __future__ import annotations

import json
from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from observer_app.study.store import Store
from observer_app.study.folder import load_study


def _read_logs(study: Path) -> pd.DataFrame:
    """Both centres' logs as learner, time (UTC), action, outcome."""
    roster = pd.read_csv(study / "roster.csv", dtype=str)
    learner_of = dict(zip(roster["log_id"], roster["learner"]))
    north = pd.read_csv(study / "logs/centre_north.csv", dtype=str, keep_default_na=False)
    zone = ZoneInfo("Europe/Berlin")  # study.toml's timezone for the north log
    north_time = pd.to_datetime(north["timestamp"]).dt.tz_localize(zone).dt.tz_convert("UTC")
    frames = [pd.DataFrame({"learner": north["trainee"].map(learner_of), "time": north_time,
                            "action": north["event"], "outcome": north["result"]})]
    rows = []
    for line in (study / "logs/centre_south.jsonl").read_text().splitlines():
        statement = json.loads(line)
        success = statement["result"].get("success")
        rows.append({"learner": learner_of[statement["actor"]["account"]["name"]],
                     "time": datetime.fromisoformat(statement["timestamp"]),
                     "action": statement["verb"]["id"].rsplit("/", 1)[-1],
                     "outcome": "" if success is None else ("pass" if success else "fail")})
    south = pd.DataFrame(rows)
    south["time"] = pd.to_datetime(south["time"], utc=True)
    south["action"] = south["action"].map({"attempted": "attempt", "asked": "help_request"})
    events = pd.concat(frames + [south], ignore_index=True)
    assert events["learner"].notna().all()  # every log id is in the roster
    events["time"] = events["time"].astype("datetime64[ns, UTC]")
    return events.sort_values("time", kind="stable").reset_index(drop=True)


@pytest.fixture(scope="module")
def demo(full_demo):
    truth = json.loads((full_demo / "truth.json").read_text())
    states = pd.read_parquet(full_demo / "truth_states.parquet")
    windows = pd.read_parquet(full_demo / "truth_windows.parquet")
    with Store(full_demo / "study/observations.sqlite") as store:
        observations = store.observations(["activity", "affect"])
        marks = store.sync_marks()
    return {"root": full_demo, "truth": truth, "states": states, "windows": windows,
            "observations": observations, "marks": marks, "events": _read_logs(full_demo / "study")}


def _to_log_time(device_times: pd.Series, clock: dict) -> pd.Series:
    """Invert device = log + offset + drift * 1e-6 * (log - reference) (truth.json's clock_model)."""
    reference = pd.Timestamp(clock["reference"])
    shifted = (device_times - reference).dt.total_seconds() - clock["offset_s"]
    return reference + pd.to_timedelta(shifted / (1 + clock["drift_ppm"] * 1e-6), unit="s")


def _activity_at(events: pd.DataFrame, states: pd.DataFrame) -> pd.Series:
    activity = states[states["dimension"] == "activity"].sort_values("start").astype({"learner": object})
    joined = pd.merge_asof(events.reset_index().astype({"learner": object}), activity[["learner", "start", "end", "state"]],
                           left_on="time", right_on="start", by="learner")
    inside = joined["time"] < joined["end"]
    return joined["state"].where(inside).set_axis(joined["index"]).sort_index()


def test_study_loads_and_every_log_learner_is_on_the_roster(demo):
    study = load_study(demo["root"] / "study")
    assert study.warnings == ()
    assert len(study.roster) == 24
    assert set(demo["events"]["learner"]) == set(study.roster["learner"])


def test_planted_clocks_are_in_the_documented_ranges(demo):
    # The scenario: one laptop runs ahead by tens of seconds and drifts by tens of ppm,
    # the other is close to exact (demo_sessions/scenario.py offset_ranges, drift_ranges).
    fast, exact = demo["truth"]["devices"]["laptop-a"], demo["truth"]["devices"]["laptop-b"]
    assert 25 <= fast["offset_s"] <= 55 and 20 <= fast["drift_ppm"] <= 60
    assert abs(exact["offset_s"]) <= 0.4 and abs(exact["drift_ppm"]) <= 2


def test_simulated_coders_match_the_truth_at_the_intended_kappa(demo):
    # About 85 % correct with confusions between neighbouring states gives Cohen's kappa
    # of roughly 0.6-0.9 at these prevalences (reference implementation: scikit-learn).
    joined = demo["observations"].merge(demo["windows"], on="observation_id", suffixes=("", "_true"))
    for dimension, unseen, lowest in (("activity", "not_visible", 0.78), ("affect", "unclear", 0.7)):
        for coder, rows in joined.groupby("coder"):
            rows = rows[rows[dimension].notna() & rows[dimension].ne(unseen)]
            kappa = cohen_kappa_score(rows[dimension].astype(str), rows[f"{dimension}_true"].astype(str))
            assert 0.6 <= kappa <= 0.9, (dimension, coder, kappa)
            assert lowest <= (rows[dimension] == rows[f"{dimension}_true"]).mean() <= 0.92


def test_about_five_percent_of_windows_could_not_be_observed(demo):
    share = demo["observations"]["activity"].eq("not_visible").mean()
    assert 0.02 <= share <= 0.09


def test_truth_behind_each_window_is_the_state_filling_most_of_it(demo):
    """truth_windows agrees with the timelines once device times go through the planted clock."""
    observations, truth = demo["observations"], demo["truth"]["devices"]
    start = pd.concat([_to_log_time(rows["window_start"], truth[device])
                       for device, rows in observations.groupby("device")]).sort_index()
    end = pd.concat([_to_log_time(rows["window_end"], truth[device])
                     for device, rows in observations.groupby("device")]).sort_index()
    windows = demo["windows"].set_index("observation_id").loc[observations["observation_id"]]
    assert (abs(windows["log_start"].to_numpy() - start.to_numpy()) <= pd.Timedelta(milliseconds=1)).all()
    activity = demo["states"][demo["states"]["dimension"] == "activity"]
    pairs = pd.DataFrame({"observation_id": observations["observation_id"], "learner": observations["learner"],
                          "from": start, "to": end}).merge(activity, on="learner")
    pairs["overlap"] = (pairs[["to", "end"]].min(axis=1) - pairs[["from", "start"]].max(axis=1)).clip(lower=pd.Timedelta(0))
    majority = pairs.sort_values("overlap").groupby("observation_id")["state"].last()
    agree = (majority.reindex(windows.index) == windows["activity"]).mean()
    assert agree >= 0.97  # whole-second grid vs exact overlap may differ on near-ties


def test_log_activity_follows_the_latent_state(demo):
    events, states = demo["events"], demo["states"]
    events = events.assign(state=_activity_at(events, states))
    assert events["state"].notna().all()
    activity = states[states["dimension"] == "activity"]
    seconds = (activity["end"] - activity["start"]).dt.total_seconds().groupby(activity["state"]).sum()
    rate = events.groupby("state").size().reindex(seconds.index, fill_value=0) / seconds
    # Intended direction: bursts when guessing, steady work on task, little while discussing,
    # almost nothing off task, silence when away.
    assert rate["rapid_guessing"] > 2 * rate["on_task"] > 2 * rate["task_discussion"]
    assert rate["task_discussion"] > rate["off_task"] > rate["away"] == 0
    attempts = events[events["action"] == "attempt"]
    failure = attempts["outcome"].eq("fail").groupby(attempts["state"]).mean()
    assert failure["rapid_guessing"] > failure["on_task"] + 0.3


def test_sync_marks_follow_a_logged_action_by_a_human_delay(demo):
    marks, events, truth = demo["marks"], demo["events"], demo["truth"]["devices"]
    marks = marks[marks["kind"] == ""]  # marks on a learner's action (the countdown's are checked elsewhere)
    assert len(marks) >= 8 * len(truth)
    for device, rows in marks.groupby("device"):
        at = _to_log_time(rows["marked_at"], truth[device])
        for learner, moment in zip(rows["learner"], at):
            own = events.loc[events["learner"] == learner, "time"]
            before = own[own <= moment]
            delay = (moment - before.iloc[-1]).total_seconds()
            assert 0.0 < delay < 2.0, (device, learner, delay)


def test_paired_runs_put_both_coders_on_the_same_learner_in_each_slot(demo):
    paired = demo["observations"][demo["observations"]["paired_start"].notna()]
    # a run is its pairing id: each laptop's paired_start is its own clock's reading of the signal
    slots = paired.groupby(["pairing_id", "slot"]).agg(coders=("coder", "nunique"), learners=("learner", "nunique"))
    assert len(slots) >= 100
    assert (slots["learners"] == 1).all()
    assert (slots["coders"] == 2).all()  # both laptops keep every paired window, coded or not
    solo = demo["observations"][demo["observations"]["paired_start"].isna()]
    assert solo.groupby("learner")["coder"].nunique().eq(1).all()  # solo halves of the roster do not overlap


def test_study_store_holds_exactly_what_the_devices_wrote(demo):
    counts = []
    for device in ("laptop-a", "laptop-b"):
        with Store(demo["root"] / "devices" / device / "observations.sqlite") as store:
            counts.append(len(store.observations()))
    assert sum(counts) == len(demo["observations"])
    assert np.all(np.array(counts) > 250)


def test_slips_are_corrected_and_the_audit_trail_keeps_both(demo):
    with Store(demo["root"] / "study/observations.sqlite") as store:
        log = store.codes_log()
    corrections = log[log["supersedes"].notna()]
    first = log.set_index("code_id").loc[corrections["supersedes"], "code"].to_numpy()
    assert (first != corrections["code"].to_numpy()).all()  # a slip, then another code
    final = demo["observations"].set_index("observation_id").loc[corrections["observation_id"], "activity"]
    assert (final.to_numpy() == corrections["code"].to_numpy()).all()  # the newest code wins
    assert demo["observations"]["corrected"].sum() == len(corrections)
    assert 0.005 <= len(corrections) / len(demo["observations"]) <= 0.06
