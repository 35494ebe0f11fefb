"""Paired coding on a spoken countdown: two devices whose clocks differ by 28 s and drift
apart by 50 ppm stay on the same learner, store paired signal marks, and align reads the
partner's offset from them.  Typed starts are refused when the typed clock difference is
above the bound."""
from __future__ import annotations

import json
import math
from datetime import datetime, timedelta, timezone

import pandas as pd
import pytest

from observer_app.coding.live import LiveSession
from observer_app.coding.shared_start import (
    TYPED_START_BOUND_S, Countdown, new_pairing_code, read_clock_difference, read_pairing_code,
)
from observer_app.study.folder import load_study
from observer_app.study.store import SIGNAL_END, SIGNAL_START, Store
from sync.clock_pairs import partner_time_ns, relative_offsets
from sync.errors import InputError
from tests.app.conftest import make_study
from tests.conftest import call_cli

T0 = datetime(2026, 3, 9, 8, 0, tzinfo=timezone.utc)  # true time zero (the log server's clock)
WINDOW = 20.0
OFFSET_B = 28.0  # laptop-b's wall clock runs 28 s ahead of laptop-a's
RATE_A, RATE_B = 1 + 20e-6, 1 - 30e-6  # each device's own rate: 50 ppm apart


class TrueTime:
    """The one true time both devices live in, in seconds since T0."""

    def __init__(self) -> None:
        self.t = 0.0


class DriftingClock:
    """A device's monotonic and wall clocks: its own rate, its own wall offset, its own boot."""

    def __init__(self, truth: TrueTime, rate: float, wall_offset_s: float, monotonic_zero: float) -> None:
        self.truth, self.rate, self.wall_offset_s, self.monotonic_zero = truth, rate, wall_offset_s, monotonic_zero

    def monotonic(self) -> float:
        return self.monotonic_zero + self.truth.t * self.rate

    def now_utc(self) -> datetime:
        return T0 + timedelta(seconds=self.truth.t * self.rate + self.wall_offset_s)

    def device_seconds(self, true_seconds: float) -> float:
        """The wall reading (s since T0) of this device at a true instant."""
        return true_seconds * self.rate + self.wall_offset_s


def _two_devices(tmp_path, truth: TrueTime):
    studies = [load_study(make_study(tmp_path / name, order="shuffled")) for name in ("a", "b")]
    stores = [Store(s.store_path) for s in studies]
    clocks = [DriftingClock(truth, RATE_A, 0.0, 5000.0), DriftingClock(truth, RATE_B, OFFSET_B, 17.0)]
    shown = new_pairing_code()
    typed = read_pairing_code(f" {shown[:2].lower()}-{shown[2:]} ")  # the partner types what they see
    assert typed == shown
    sessions = [LiveSession.start(study, store, clock, coder=coder, device=device, pairing_id=pairing, signal=True)
                for study, store, clock, coder, device, pairing in
                zip(studies, stores, clocks, ("ana", "ben"), ("laptop-a", "laptop-b"), (shown, typed))]
    return studies, stores, clocks, sessions


@pytest.mark.parametrize("reaction_a, reaction_b", [(0.0, 0.0), (0.4, 0.0), (0.05, 0.3)])
def test_a_signal_start_keeps_two_drifting_devices_28_s_apart_on_the_same_learner(tmp_path, reaction_a, reaction_b):
    truth = TrueTime()
    studies, stores, clocks, (ana, ben) = _two_devices(tmp_path, truth)
    assert ana.state().awaiting_signal
    assert not ana.code("activity", "on_task") and ana.state().saved_count == 0  # nothing codes before the signal
    press = 12.0  # "3, 2, 1, now": each coder presses at "now" plus their own reaction time
    for session, reaction in sorted(((ana, reaction_a), (ben, reaction_b)), key=lambda pair: pair[1]):
        truth.t = press + reaction
        assert session.signal_start()
        assert not session.signal_start()  # a second press does not move the grid
    mismatches = compared = 0
    step = 0.25
    for index in range(int(13 / step), int(1830 / step)):
        truth.t = index * step
        if truth.t == 400:  # ana sees L04 leave, ben does not: the schedules must not diverge
            ana.mark_absent("L04")
        ana.tick()
        ben.tick()
        one, two = ana.state(), ben.state()
        # each device's own grid: slot k starts at its press plus k windows on its own monotonic clock
        for state, clock, reaction in ((one, clocks[0], reaction_a), (two, clocks[1], reaction_b)):
            expected = math.floor((truth.t - press - reaction) * clock.rate / WINDOW + 1e-9)
            assert state.slot == expected
        near_boundary = min(((truth.t - press - r) * c.rate) % WINDOW for r, c in
                            ((reaction_a, clocks[0]), (reaction_b, clocks[1]))) < 0.5
        if (one.slot, one.learner) != (two.slot, two.learner):
            mismatches += 1
            assert near_boundary, (truth.t, one.slot, two.slot)
        else:
            compared += 1
            assert one.check_code == two.check_code and len(one.check_code) == 3
    assert compared + mismatches == int(1830 / step) - int(13 / step)
    assert compared > 0.97 * (1800 / step)  # out of step only in the < 0.5 s after some boundaries
    # slot boundaries on the common (true) clock, over the whole 30 minutes: within 0.5 s
    for slot in range(int(1800 / WINDOW) + 1):
        boundary_a = press + reaction_a + slot * WINDOW / RATE_A
        boundary_b = press + reaction_b + slot * WINDOW / RATE_B
        assert abs(boundary_a - boundary_b) < 0.5
    # the closing countdown: a second paired mark on both devices
    closing = press + 1800 + 5  # this time the reaction times swap: the worst case for the two marks
    for session, reaction in sorted(((ana, reaction_b), (ben, reaction_a)), key=lambda pair: pair[1]):
        truth.t = closing + reaction
        assert session.signal_end()
    ana.end(), ben.end()
    marks = [store.sync_marks() for store in stores]
    for frame in marks:
        assert list(frame["kind"]) == [SIGNAL_START, SIGNAL_END]
        assert frame["pairing_id"].nunique() == 1
    assert marks[0]["pairing_id"].iloc[0] == marks[1]["pairing_id"].iloc[0]
    # ana's slot of the absent learner was skipped, not removed: ben coded or missed it, ana wrote nothing
    observations = [store.observations(studies[0].scheme.dimension_names) for store in stores]
    assert (observations[0]["learner"] == "L04").sum() < (observations[1]["learner"] == "L04").sum()
    # on a common clock (b's stamps moved onto a's by the paired marks) the windows coincide within 0.5 s
    paired = relative_offsets(_paired_frame(marks))
    row = paired.iloc[0]
    assert (row["device_a"], row["device_b"], row["marks_used"]) == ("laptop-a", "laptop-b", 2)
    truth_offset = clocks[1].device_seconds(press) - clocks[0].device_seconds(press)
    assert abs(row["offset_s"] - truth_offset) < 0.5
    both = observations[0].merge(observations[1], on=["slot", "learner"], suffixes=("_a", "_b"))
    assert len(both) >= 70  # 90 slots less the ones ana skipped for L04
    starts_a = both["window_start_a"].astype("int64").to_numpy()
    starts_b_on_a = partner_time_ns(row, "laptop-b", both["window_start_b"].astype("int64").to_numpy())
    assert abs(starts_b_on_a - starts_a).max() / 1e9 < 0.5
    for store in stores:
        store.close()


def _paired_frame(marks):
    frame = pd.concat(marks, ignore_index=True)
    return pd.DataFrame({"pairing_id": frame["pairing_id"], "device": frame["device"], "kind": frame["kind"],
                         "marked_ns": frame["marked_at"].astype("int64")})


def test_a_typed_start_with_clocks_further_apart_than_the_bound_is_refused(study, store, clock):
    start = clock.now_utc() + timedelta(minutes=2)
    with pytest.raises(InputError) as refused:
        LiveSession.start(study, store, clock, coder="ana", device="laptop-a", paired_start=start, pairing_id="ABCDE",
                          typed_clock_difference_s=TYPED_START_BOUND_S + 0.5)
    assert "spoken countdown" in refused.value.line() and "+1.5 s" in refused.value.line()
    assert store.sessions().empty  # nothing written for a refused start
    with pytest.raises(InputError):
        read_clock_difference("-3")
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-a", paired_start=start,
                                pairing_id="ABCDE", typed_clock_difference_s=-0.4)
    stored = store.sessions()
    assert stored.loc[0, "typed_clock_difference_s"] == pytest.approx(-0.4)
    assert stored.loc[0, "pairing_id"] == "ABCDE" and session.state().waiting


def test_a_mistyped_pairing_code_names_what_is_wrong():
    with pytest.raises(InputError) as wrong:
        read_pairing_code("AB0DE")
    assert "'AB0DE'" in wrong.value.line() and "0" in wrong.value.line()
    with pytest.raises(InputError):
        read_pairing_code("ABCD")


def test_the_countdown_reads_three_two_one_now(clock):
    countdown = Countdown(clock.monotonic)
    assert countdown.word() == ""
    countdown.begin()
    words = []
    for _ in range(5):
        words.append(countdown.word())
        clock.advance(1.0)
    assert words == ["3", "2", "1", "now", ""]


def test_resume_after_a_reboot_reanchors_from_the_wall_clock_and_says_so(study, store):
    truth = TrueTime()
    device = DriftingClock(truth, 1.0, 0.0, 900.0)
    session = LiveSession.start(study, store, device, coder="ana", device="laptop-a", pairing_id="KM7QX", signal=True)
    truth.t = 3.0
    session.signal_start()
    truth.t = 3.0 + 20 * 7 + 5  # slot 7, then the laptop reboots: its monotonic clock starts again
    rebooted = DriftingClock(truth, 1.0, 0.0, 2.0 - truth.t)
    resumed = LiveSession.reopen(study, store, rebooted, session.session_id)
    state = resumed.state()
    assert state.slot == 7 and state.time_left == pytest.approx(15)
    assert "re-anchored from this device's wall clock" in state.message
    assert state.check_code == session.state().check_code or session.state().slot != 7


def test_align_lets_a_device_without_log_marks_borrow_its_partner_s_model(tmp_path):
    """laptop-a marks learners' actions in the log; laptop-b only took part in the signals."""
    truth = TrueTime()
    studies, stores, clocks, (ana, ben) = _two_devices(tmp_path, truth)
    truth.t = 10.0
    ana.signal_start()
    truth.t = 10.3
    ben.signal_start()
    events = [60.0 + 300.0 * k for k in range(6)]  # isolated actions of L01, seen by ana 0.3-0.5 s late
    for number, moment in enumerate(events):
        truth.t = moment + 0.3 + 0.04 * number
        stores[0].record_sync_mark(session_id=ana.session_id, marked_at=clocks[0].now_utc(), learner="L01",
                                   note="action seen")
    truth.t = 1810.0
    ana.signal_end()
    truth.t = 1810.25
    ben.signal_end()
    ana.end(), ben.end()
    folder = studies[0].dir
    rows = "".join(f"n-0001,{(T0 + timedelta(seconds=moment)).isoformat()},attempt,correct,s1,wiring,2\n"
                   for moment in events)
    (folder / "logs").mkdir(exist_ok=True)
    (folder / "logs" / "centre_north.csv").write_text("trainee,timestamp,event,result,step,skill,seconds\n" + rows)
    stores[0].close()
    stores[1].close()
    assert call_cli("import", str(folder), str(studies[1].store_path)).returncode == 0
    result = call_cli("align", str(folder), "--json")
    assert result.returncode == 0, result.stderr
    payload = json.loads(result.stdout)
    assert payload["devices"]["laptop-a"]["method"] == "marks"
    assert payload["devices"]["laptop-b"]["method"] == "borrowed"
    assert payload["borrowed"]["laptop-b"]["from"] == "laptop-a"
    model_b = payload["devices"]["laptop-b"]
    reference_s = (model_b["reference_ns"] - int(T0.timestamp() * 1e9)) / 1e9  # true (log) time of the reference
    truth_b = clocks[1].device_seconds(reference_s) - reference_s
    relative_truth = clocks[1].device_seconds(reference_s) - clocks[0].device_seconds(reference_s)
    assert abs(payload["borrowed"]["laptop-b"]["relative_offset_s"] - relative_truth) < 0.5
    # what b borrows is a's fit moved by that relative offset: b is off by a's own error plus < 0.5 s
    model_a = payload["devices"]["laptop-a"]
    own_error = abs(model_a["offset_s"] + model_a["drift_ppm"] * 1e-6 * (model_b["reference_ns"] - model_a["reference_ns"])
                    / 1e9 - (clocks[0].device_seconds(reference_s) - reference_s))
    assert abs(model_b["offset_s"] - truth_b) < own_error + 0.5
    assert model_b["marks_used"] == 2


def test_align_checks_a_typed_clock_difference_against_the_closing_signal(tmp_path):
    """The coders typed +0.5 s, but laptop-b's clock is really 28 s ahead: align says so."""
    truth = TrueTime()
    studies = [load_study(make_study(tmp_path / name)) for name in ("a", "b")]
    stores = [Store(s.store_path) for s in studies]
    clocks = [DriftingClock(truth, 1.0, 0.0, 50.0), DriftingClock(truth, 1.0, OFFSET_B, 9.0)]
    sessions = []
    for study, store, clock, typed, device in zip(studies, stores, clocks, (0.5, -0.5), ("laptop-a", "laptop-b")):
        start = clock.now_utc() + timedelta(minutes=1)  # each reads "the next minute" off its own clock
        sessions.append(LiveSession.start(study, store, clock, coder=device, device=device, paired_start=start,
                                          pairing_id="QT4MZ", typed_clock_difference_s=typed))
    truth.t = 600.0
    for session, reaction in zip(sessions, (0.0, 0.2)):
        truth.t = 600.0 + reaction
        assert session.signal_end()
    for session, store in zip(sessions, stores):
        session.end()
        store.close()
    assert call_cli("import", str(studies[0].dir), str(studies[1].store_path)).returncode == 0
    result = call_cli("align", str(studies[0].dir), "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=28",
                      "--json")
    assert result.returncode == 0, result.stderr
    checks = {check["device"]: check for check in json.loads(result.stdout)["typed_clock_differences"]}
    assert checks["laptop-a"]["typed_s"] == 0.5 and checks["laptop-a"]["agrees"] is False
    assert abs(checks["laptop-a"]["measured_s"] - OFFSET_B) < 0.5
    assert abs(checks["laptop-b"]["measured_s"] + OFFSET_B) < 0.5
    text = call_cli("align", str(studies[0].dir), "--set-offset", "laptop-a=0", "--set-offset", "laptop-b=28")
    assert "typed a clock difference of +0.5 s" in text.stdout
