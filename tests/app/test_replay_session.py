"""Replay coding without Qt: clips on the log's clock, coding, undo, resume, agreement by clip."""
from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest
from sklearn.metrics import cohen_kappa_score

from demo_sessions import committed_copy
from observer_app.pipeline.alignment import read_study_logs
from observer_app.coding.replay import ReplaySession
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from tests.conftest import call_cli


@pytest.fixture
def demo(tmp_path):
    """A private copy of the committed demo study (never opened in place)."""
    return load_study(shutil.copytree(committed_copy(), tmp_path / "study"))


def _replay_rows(store: Store, session_id: str, dimensions) -> pd.DataFrame:
    observations = store.observations(dimensions)
    return observations[observations["session_id"] == session_id]


def test_clips_are_cut_on_the_log_clock_and_hold_the_logs_events(demo):
    events, _ = read_study_logs(demo)
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ann", device="laptop-r",
                                      learners=["L01", "L08"])
    clips = session.clips
    window_ns = int(demo.window_seconds * 1e9)
    roster = demo.roster.set_index("learner")["log_id"]
    chosen = {roster["L01"], roster["L08"]}
    assert set(clips["log_id"]) == chosen and set(clips["learner"]) == {"L01", "L08"}
    assert (clips["end_ns"] - clips["start_ns"] == window_ns).all()
    assert (clips["start_ns"] % window_ns == 0).all()  # one grid for every coder
    assert clips["start_ns"].is_monotonic_increasing  # time order
    assert clips["clip"].is_unique
    # Reference: a plain pandas filter of the events table per clip (start inclusive, end exclusive).
    learner_text = events["learner"].astype(str)
    for log_id, start, end, count in zip(clips["log_id"], clips["start_ns"], clips["end_ns"], clips["events"]):
        expected = ((learner_text == log_id) & (events["time_ns"] >= start) & (events["time_ns"] < end)).sum()
        assert count == expected > 0
    # Every event of the chosen learners is in exactly one offered clip: none lost, none twice.
    assert clips["events"].sum() == learner_text.isin(chosen).sum()
    # The screen's event list is the same filter, with offsets measured from the clip start.
    first = clips.iloc[0]
    shown = session.state().events
    reference = events[(learner_text == first["log_id"]) & (events["time_ns"] >= first["start_ns"])
                       & (events["time_ns"] < first["end_ns"])]
    assert shown["time_ns"].tolist() == reference["time_ns"].tolist()
    assert ((shown["offset_s"] >= 0) & (shown["offset_s"] < demo.window_seconds)).all()


def test_a_seeded_sample_is_repeatable_and_a_subset_in_time_order(demo):
    with Store(demo.store_path) as store:
        every = ReplaySession.start(demo, store, FakeClock(), coder="ann", device="r", learners=["L02"]).clips
        first = ReplaySession.start(demo, store, FakeClock(), coder="ann", device="r", learners=["L02"],
                                    sample=7, seed=3).clips
        again = ReplaySession.start(demo, store, FakeClock(), coder="ben", device="r", learners=["L02"],
                                    sample=7, seed=3).clips
    assert len(first) == 7 and first["clip"].tolist() == again["clip"].tolist()
    assert set(first["clip"]) <= set(every["clip"]) and first["start_ns"].is_monotonic_increasing


def test_coding_writes_clip_bounds_undo_retracts_skip_leaves_a_no_code_row_and_reopening_resumes(demo):
    dimensions = demo.scheme.dimension_names
    clock = FakeClock()
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, clock, coder="ann", device="laptop-r", learners=["L03"])
        clips = session.clips
        assert session.press("1") and session.state().position == 0  # affect still to code
        assert session.press("q") and session.state().position == 1  # both coded: next clip
        session.press("2")
        assert session.undo()  # retracts the 2 of clip 2
        assert session.state().position == 1 and session.state().missing == tuple(dimensions)
        session.press("3")
        session.press("w")
        assert session.skip()  # clip 3 left without a code
        session.code_remaining_not_observed()  # clip 4: could-not-observe on both dimensions
        session.press("1")  # clip 5 partly coded, then the app closes (no end row)
        rows = _replay_rows(store, session.session_id, dimensions)
        log = store.codes_log()
    assert len(rows) == 5 and set(rows["mode"]) == {"replay"} and rows["slot"].isna().all()
    by_clip = rows.set_index("clip")
    for position in range(5):
        clip = clips.iloc[position]
        row = by_clip.loc[clip["clip"]]
        assert row["window_start"] == pd.Timestamp(int(clip["start_ns"]), tz="UTC")
        assert row["window_end"] == pd.Timestamp(int(clip["end_ns"]), tz="UTC")
    assert by_clip.loc[clips["clip"][0], ["activity", "affect"]].tolist() == ["on_task", "focused"]
    assert by_clip.loc[clips["clip"][1], ["activity", "affect"]].tolist() == ["off_task", "confused"]
    assert bool(by_clip.loc[clips["clip"][2], "no_code"])
    assert by_clip.loc[clips["clip"][3], ["activity", "affect"]].tolist() == ["not_visible", "unclear"]
    retraction = log[log["code"].isna()]
    assert len(retraction) == 1 and retraction["dimension"].iloc[0] == "activity"
    assert log.loc[log["code_id"] == retraction["supersedes"].iloc[0], "code"].iloc[0] == "task_discussion"

    with Store(demo.store_path) as store:
        again = ReplaySession.reopen(demo, store, clock, session.session_id)
        state = again.state()
        assert state.position == 4 and state.coded == {"activity": "on_task"}  # the partly coded clip
        again.press("e")
        assert again.state().position == 5
        again.end()
        assert pd.notna(store.sessions().set_index("session_id").loc[session.session_id, "ended_at"])


def test_two_coders_replaying_the_same_clips_are_paired_by_clip(demo):
    ann_codes = ["1q", "1q", "3e", "2w", "1q", "4e"]
    ben_codes = ["1q", "2q", "3e", "2w"]  # ben stops after four clips
    with Store(demo.store_path) as store:
        for coder, keys in (("rhea", ann_codes), ("sol", ben_codes)):
            session = ReplaySession.start(demo, store, FakeClock(), coder=coder, device=f"{coder}-laptop",
                                          learners=["L04", "L05"])
            for pair in keys:
                for key in pair:
                    session.press(key)
            session.end()
    # replay needs no clock model, but the demo's live laptops do before agree pairs anything
    assert call_cli("align", demo.dir).returncode == 0
    result = call_cli("agree", demo.dir, "--json", "--coders", "rhea,sol", "--resamples", "50")
    assert result.returncode == 0, result.stderr
    figures = json.loads(result.stdout)
    assert figures["pairing"]["units_by_method"]["clip"] == 4  # the clips both coded (the demo's live units aside)
    assert figures["coders"] == ["rhea", "sol"] and figures["units"] == 4
    activity = figures["dimensions"]["activity"]
    assert activity["units"] == 4
    # Reference: scikit-learn's Cohen's kappa on the same four pairs (Cohen 1960).
    rhea = ["on_task", "on_task", "off_task", "task_discussion"]
    sol = ["on_task", "task_discussion", "off_task", "task_discussion"]
    assert activity["cohen_kappa"]["value"] == pytest.approx(cohen_kappa_score(rhea, sol), abs=1e-9)


def test_undo_into_an_earlier_clip_goes_back_to_it_then_on_to_the_furthest_clip(demo):
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ann", device="laptop-r", learners=["L06"])
        for key in "1q2w3":  # clips 1 and 2 coded, clip 3 half coded
            session.press(key)
        assert session.state().position == 2
        session.undo()  # the 3 of clip 3
        session.undo()  # the w of clip 2: back to clip 2
        assert session.state().position == 1 and session.state().coded == {"activity": "task_discussion"}
        session.press("e")  # clip 2 complete again
        assert session.state().position == 2 and session.state().missing == ("activity", "affect")
        current = store.observations(demo.scheme.dimension_names).set_index("clip")
    assert current.loc[session.clips["clip"][1], ["activity", "affect"]].tolist() == ["task_discussion", "frustrated"]


def test_replay_reads_only_the_roster_learners_and_cuts_the_same_clips(demo, monkeypatch):
    """A platform's log holds many learners the study never enrolled: replay reads only the
    roster's (whole) logs, so opening a session does not load the platform, and the clips and
    their events are those cut from the whole read."""
    import observer_app.pipeline.alignment as alignment
    from observer_app.coding.replay import cut_clips

    log = demo.dir / "logs" / "centre_north.csv"
    lines = log.read_text().splitlines()
    strangers = [line.replace("n-", "x-", 1) for line in lines[1:2000]]  # other learners on the platform
    log.write_text("\n".join(lines + strangers) + "\n")
    whole, _ = read_study_logs(demo)
    assert whole["learner"].astype(str).str.startswith("x-").sum() == len(strangers)
    wanted = []
    real = alignment.read_study_logs

    def spying(study, *arguments, **options):
        wanted.append(options.get("only_log_ids"))
        return real(study, *arguments, **options)

    monkeypatch.setattr(alignment, "read_study_logs", spying)
    learners = ["L01", "L08", "L12"]
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="ann", device="laptop-r", learners=learners)
    assert wanted and set(wanted[0]) == set(demo.roster["log_id"].dropna().astype(str))
    assert not session.events["learner"].astype(str).str.startswith("x-").any()
    reference = cut_clips(whole, demo.roster, learners, demo.window_seconds)
    pd.testing.assert_frame_equal(session.clips.reset_index(drop=True), reference)
