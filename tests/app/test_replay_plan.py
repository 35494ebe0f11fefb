"""Replay as a planned coding job: sampling, seeded order, double coding, the clip digest, skip undo, end summary."""
from __future__ import annotations

import shutil

import numpy as np
import pytest
from PySide6.QtCore import Qt

from demo_sessions import committed_copy
from observer_app.coding.clock import FakeClock
from observer_app.coding.replay import ReplaySession, cut_clips
from observer_app.coding.replay_plan import ReplayRule, assign_clips, parse_sample
from observer_app.pipeline.alignment import read_study_logs
from observer_app.study.folder import load_study
from observer_app.study.store import Store
from observer_app.ui.end_screen import EndScreen
from observer_app.ui.overview import StudyOverview
from observer_app.ui.replay import ReplayScreen
from tests.app.conftest import replay_start_form
from sync.errors import InputError
from tests.conftest import call_cli

LEARNERS = ("L01", "L02", "L03", "L07", "L08")


@pytest.fixture
def demo(tmp_path):
    return load_study(shutil.copytree(committed_copy(), tmp_path / "study"))


@pytest.fixture
def all_clips(demo):
    events, _ = read_study_logs(demo)
    return cut_clips(events, demo.roster, LEARNERS, demo.window_seconds)


def test_n_clips_per_learner_with_at_least_k_events_in_a_seeded_random_order(all_clips):
    rule = ReplayRule(learners=LEARNERS, per_learner=4, min_events=3, seed=5, coders=("ana",))
    plan = assign_clips(all_clips, rule)
    assert (plan["events"] >= 3).all()
    candidates = all_clips[all_clips["events"] >= 3].reset_index(drop=True)
    expected = candidates.groupby("learner").size().clip(upper=4)
    assert plan.groupby("learner").size().to_dict() == expected.to_dict()
    # The order is numpy's: one default_rng(seed) key per candidate, kept per learner, sorted.
    keys = np.random.default_rng(5).random(len(candidates))
    kept = candidates.assign(key=keys)
    kept = kept[kept.groupby("learner")["key"].rank(method="first") <= 4].sort_values("key")
    assert plan["clip"].tolist() == kept["clip"].tolist()
    assert plan["start_ns"].tolist() != sorted(plan["start_ns"])  # not time order
    assert plan.equals(assign_clips(all_clips, rule))  # reproducible
    assert assign_clips(all_clips, ReplayRule(**{**rule.__dict__, "seed": 6}))["clip"].tolist() != plan["clip"].tolist()


def test_a_share_of_all_clips(all_clips):
    plan = assign_clips(all_clips, ReplayRule(learners=LEARNERS, share=0.25, coders=("ana",)))
    assert len(plan) == round(0.25 * len(all_clips)) and plan["clip"].is_unique


def test_a_double_coded_share_goes_to_two_coders_the_rest_to_one(all_clips):
    rule = ReplayRule(learners=LEARNERS, share=0.5, seed=3, double_share=0.2, coders=("ana", "ben", "cleo"))
    plan = assign_clips(all_clips, rule)
    per_clip = plan.groupby("clip")["coder"].agg(list)
    clips = len(per_clip)
    doubles = plan.drop_duplicates("clip")["double"].sum()
    assert doubles == round(0.2 * clips)
    assert sorted(per_clip.map(len).value_counts().to_dict().items()) == [(1, clips - doubles), (2, doubles)]
    assert per_clip[per_clip.map(len) == 2].map(lambda coders: len(set(coders)) == 2).all()
    load = plan["coder"].value_counts()
    assert load.max() - load.min() <= 2  # shared out round-robin
    with pytest.raises(InputError, match="two or more coders"):
        assign_clips(all_clips, ReplayRule(learners=LEARNERS, double_share=0.2, coders=("ana",)))


@pytest.mark.parametrize(("text", "expected"), [("5", (5, None)), ("5 per learner", (5, None)), ("20%", (None, 0.2)),
                                                ("20% of all", (None, 0.2)), ("all", (None, None)),
                                                ("", (None, None))])
def test_the_sample_field(text, expected):
    assert parse_sample(text) == expected


@pytest.mark.parametrize("text", ["five", "0", "150%", "-2"])
def test_a_bad_sample_is_refused_with_what_to_write(text):
    with pytest.raises(InputError, match="number of clips per learner"):
        parse_sample(text)


def test_a_second_device_gets_the_same_plan_and_a_different_log_copy_is_told_so(tmp_path):
    first = load_study(shutil.copytree(committed_copy(), tmp_path / "one"))
    second = load_study(shutil.copytree(committed_copy(), tmp_path / "two"))
    rule = ReplayRule(learners=LEARNERS, per_learner=3, seed=9, double_share=0.3, coders=("ana", "ben"))
    with Store(first.store_path) as store:
        ana = ReplaySession.start(first, store, FakeClock(), coder="ana", device="laptop-a", rule=rule)
        plans = store.replay_plans()
    with Store(second.store_path) as store:
        ben = ReplaySession.start(second, store, FakeClock(), coder="ben", device="laptop-b", rule=rule)
        assert store.replay_plans()["plan_id"].tolist() == plans["plan_id"].tolist()
    shared = set(ana.clips["clip"]) & set(ben.clips["clip"])
    assert len(shared) == round(0.3 * 15) and len(set(ana.clips["clip"]) | set(ben.clips["clip"])) == 15
    # The stored assignment says who codes what; the coders' screens never say which clips are shared.
    assert "double" not in ana.clips.columns

    third = shutil.copytree(committed_copy(), tmp_path / "three")
    log = third / "logs" / "centre_north.csv"
    lines = log.read_text(encoding="utf-8").splitlines()
    bench_one = [number for number, line in enumerate(lines) if line.startswith("n-5920,")]  # L01's events
    dropped = set(bench_one[-30:])  # a copy that missed L01's last events
    log.write_text("\n".join(line for number, line in enumerate(lines) if number not in dropped) + "\n",
                   encoding="utf-8")
    assert call_cli("import", third, first.store_path).returncode == 0
    third_study = load_study(third)
    with Store(third_study.store_path) as store, pytest.raises(InputError, match="logs differ"):
        ReplaySession.start(third_study, store, FakeClock(), coder="ben", device="laptop-c", rule=rule)


def test_backspace_after_a_skip_undoes_the_skip(demo):
    rule = ReplayRule(learners=LEARNERS, per_learner=2, seed=1, coders=("ana",))
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ana", device="laptop-a", rule=rule)
        session.press("1")
        session.press("q")  # clip 1 coded
        session.skip()  # clip 2 skipped
        assert session.state().position == 2 and session.state().skipped_clips == 1
        session.undo()
        state = session.state()
        assert state.position == 1 and state.skipped_clips == 0 and "Skip undone" in state.message
        assert state.coded_clips == 1  # clip 1's codes are still in effect
        session.press("3")
        session.press("w")
        rows = store.observations(demo.scheme.dimension_names)
        mine = rows[rows["session_id"] == session.session_id].set_index("clip")
        assert mine.loc[session.clips["clip"][1], "activity"] == "off_task"
        assert mine.loc[session.clips["clip"][0], "activity"] == "on_task"
        assert session.state().position == 2


def test_f10_shows_a_replay_end_summary_and_the_overview_says_replay(qtbot, demo):
    window, form = replay_start_form(qtbot, demo.dir)
    form.sample.setText("2")
    qtbot.keyClick(form.coder, Qt.Key.Key_Return)
    qtbot.waitUntil(lambda: isinstance(window.page, ReplayScreen), timeout=20_000)  # logs read off the UI thread
    screen = window.page
    assert isinstance(screen, ReplayScreen) and len(screen.session.clips) == 24
    for key in "1q":
        qtbot.keyClick(screen, key)
    qtbot.keyClick(screen, Qt.Key.Key_PageDown)
    qtbot.keyClick(screen, Qt.Key.Key_F10)
    qtbot.keyClick(screen, Qt.Key.Key_F10)
    end = window.page
    assert isinstance(end, EndScreen)
    assert end.figures.text().startswith("2 clips") and "1 coded" in end.figures.text() and "1 skipped" in end.figures.text()
    qtbot.keyClick(end, Qt.Key.Key_Return)
    assert isinstance(window.page, StudyOverview)
    table = window.overview.sessions_table
    modes = {table.item(row, 0).text(): table.item(row, 2).text() for row in range(table.rowCount())}
    assert modes["rhea"] == "replay"


def test_a_bad_sample_is_one_line_on_the_start_form(qtbot, demo):
    window, form = replay_start_form(qtbot, demo.dir)
    form.sample.setText("lots")
    qtbot.keyClick(form.coder, Qt.Key.Key_Return)
    assert window.page is form and "'lots' is not a sample" in form.error.text()


def test_the_sampling_rule_travels_in_the_export_manifest(demo, tmp_path):
    import json

    rule = ReplayRule(learners=LEARNERS, per_learner=2, min_events=3, seed=4, coders=("ana",))
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ana", device="replay-desk", rule=rule)
        session.press("1")
        session.press("q")
    for device in ("laptop-a", "laptop-b"):  # the demo's live coders' clocks: a decision export requires
        assert call_cli("align", demo.dir, "--set-offset", f"{device}=0").returncode == 0
    out = tmp_path / "windows.csv"
    result = call_cli("export", demo.dir, "--out", out)
    assert result.returncode == 0, result.stderr
    manifests = [path for path in tmp_path.iterdir() if path.name.startswith("windows") and "manifest" in path.name]
    manifest = json.loads(manifests[0].read_text(encoding="utf-8"))
    sampling = manifest["parameters"]["replay_sampling"]
    assert len(sampling) == 1 and "2 clips per learner with at least 3 log events" in sampling[0]["rule"]
    assert "idle learners" in sampling[0]["caution"]


def test_replay_confirmations_name_the_learner_and_events_show_short_names(qtbot, demo):
    rule = ReplayRule(learners=("L07", "L08"), per_learner=2, seed=1, coders=("ana",))  # south: xAPI statements
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ana", device="laptop-a", rule=rule)
        screen = ReplayScreen(session)
        qtbot.addWidget(screen)
        learner = session.label(str(session.clips["learner"][0]))
        qtbot.keyClick(screen, "1")
        assert screen.message_label.text().startswith(f"Saved for {learner}, clip 1")
        actions = [screen.events_table.item(row, 1).text() for row in range(screen.events_table.rowCount())]
        assert actions and not any(action.startswith("http") for action in actions)


def test_the_clip_events_scroll_with_the_arrow_keys(qtbot, demo):
    events, _ = read_study_logs(demo)
    clips = cut_clips(events, demo.roster, LEARNERS, demo.window_seconds)
    busiest = int(clips["events"].max())
    rule = ReplayRule(learners=LEARNERS, per_learner=1, min_events=busiest, coders=("ana",))
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ana", device="laptop-a", rule=rule)
        screen = ReplayScreen(session)
        qtbot.addWidget(screen)
        screen.resize(1280, 720)
        screen.show()
        qtbot.waitExposed(screen)
        bar = screen.events_table.verticalScrollBar()
        assert screen.events_table.rowCount() == busiest and bar.maximum() > 0
        qtbot.keyClick(screen, Qt.Key.Key_Down)
        assert bar.value() > 0 and session.state().position == 0  # scrolling is not skipping
