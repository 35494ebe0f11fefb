"""The end screen computes the partner agreement off the UI thread (pytest-qt, offscreen).

Each test drives the real MainWindow to the end of a paired session coded by two coders
into the same store (as if the partner's store was imported).  The agreement function is
the real one, wrapped only to hold it at a gate the test opens, so the test knows the
computation is still running while it presses keys.
"""
from __future__ import annotations

import threading

import numpy as np
import pytest
import shiboken6
from PySide6.QtCore import Qt
from sklearn.metrics import cohen_kappa_score

from observer_app.coding import end_agreement
from observer_app.coding.clock import FakeClock
from observer_app.coding.live import LiveSession
from observer_app.study.store import Store
from observer_app.ui import main_window as main_window_module
from observer_app.ui.end_screen import COMPUTING, FAILED, EndScreen
from observer_app.ui.main_window import MainWindow
from observer_app.ui.observing import ObservingScreen
from observer_app.ui.overview import StudyOverview
from observer_app.ui.slot_errors import ERROR_LOG
from tests.app.conftest import make_study

ACTIVITY_KEYS = {"1": "on_task", "3": "off_task", "4": "rapid_guessing"}
AFFECT_KEYS = {"q": "focused", "w": "confused", "e": "frustrated", "r": "bored"}
GATE_SECONDS = 20  # the most a gated computation waits for the test to open its gate


class GatedAgreement:
    """The real ``partner_agreement``, held until ``gate`` opens; notes the thread it ran on."""

    def __init__(self, fail: bool = False) -> None:
        self.gate = threading.Event()
        self.opened_in_time: bool | None = None
        self.thread: int | None = None
        self.fail = fail

    def __call__(self, study, session_id):
        self.thread = threading.get_ident()
        self.opened_in_time = self.gate.wait(GATE_SECONDS)
        if self.fail:
            raise RuntimeError("the bootstrap ran out of memory\nsecond line of detail")
        return end_agreement.partner_agreement(study, session_id)


@pytest.fixture
def paired_window(qtbot, tmp_path):
    """A MainWindow on the observing screen of ana's paired session; ben's partner session, coded
    at the same slots with 80 % the same codes, is in the same store.  Yields (window, codes)."""
    window = MainWindow(make_study(tmp_path / "study"), clock=FakeClock(monotonic=100.0), device="laptop-1")
    qtbot.addWidget(window)
    window.show()
    qtbot.waitExposed(window)
    shared = window.clock.now_utc()
    partner_clock = FakeClock(monotonic=90000.0)
    partner_store = Store(window.study.store_path)
    ana = LiveSession.start(window.study, window.store, window.clock, coder="ana", device="laptop-1",
                            typed_clock_difference_s=0.0, paired_start=shared)
    ben = LiveSession.start(window.study, partner_store, partner_clock, coder="ben", device="laptop-2",
                            typed_clock_difference_s=0.0, paired_start=shared)
    rng = np.random.default_rng(11)
    codes = {"ana": {"activity": [], "affect": []}, "ben": {"activity": [], "affect": []}}
    for _ in range(40):  # 40 windows of 20 s
        truth = (rng.choice(list(ACTIVITY_KEYS)), rng.choice(list(AFFECT_KEYS)))
        for session, coder in ((ana, "ana"), (ben, "ben")):
            for dimension, key, keys in zip(("activity", "affect"), truth, (ACTIVITY_KEYS, AFFECT_KEYS)):
                chosen = key if rng.random() < 0.8 else rng.choice(list(keys))
                session.press(chosen)
                codes[coder][dimension].append(keys[chosen])
        for clock in (window.clock, partner_clock):
            clock.advance(20)
        ana.tick()
        ben.tick()
    ben.end()
    partner_store.close()
    window.session = ana
    window.show_observing()
    yield window, codes
    window.close()


def end_session(qtbot, window) -> EndScreen:
    assert isinstance(window.page, ObservingScreen)
    qtbot.keyClick(window.page, Qt.Key.Key_F10)
    qtbot.keyClick(window.page, Qt.Key.Key_F10)  # the second press ends
    assert isinstance(window.page, EndScreen)
    return window.page


def test_the_end_screen_stays_responsive_while_the_agreement_is_computed(qtbot, paired_window, monkeypatch):
    window, codes = paired_window
    gated = GatedAgreement()
    monkeypatch.setattr(main_window_module, "partner_agreement", gated)
    end = end_session(qtbot, window)
    # the busy state: counts at once, the agreement announced, an indeterminate bar
    assert end.agreement.text() == COMPUTING
    assert end.busy.isVisible() and end.busy.minimum() == end.busy.maximum() == 0
    assert "40 windows" in end.figures.text()
    qtbot.waitUntil(lambda: gated.thread is not None)
    assert gated.thread != threading.get_ident()  # the computation runs on another thread
    # while it is held, the UI thread takes keys: F6 switches the whole window to discreet mode
    before = window.theme
    qtbot.keyClick(end, Qt.Key.Key_F6)
    assert window.theme is not before and end.agreement.text() == COMPUTING
    with qtbot.waitSignal(end.job.finished, timeout=30_000):
        gated.gate.set()
    assert gated.opened_in_time
    assert not end.busy.isVisible()
    text = end.agreement.text()
    assert text.startswith("Agreement with ben over 40 windows:")
    for dimension in ("activity", "affect"):
        # reference: scikit-learn's Cohen's kappa on the same two code sequences
        expected = cohen_kappa_score(codes["ana"][dimension], codes["ben"][dimension])
        assert f"{dimension}: kappa {expected:.3f}" in text
    assert window.error_bar.isHidden()
    qtbot.keyClick(end, Qt.Key.Key_Return)
    assert isinstance(window.page, StudyOverview)


def test_leaving_before_the_agreement_arrives_drops_the_late_answer(qtbot, paired_window, monkeypatch):
    window, _ = paired_window
    gated = GatedAgreement()
    monkeypatch.setattr(main_window_module, "partner_agreement", gated)
    end = end_session(qtbot, window)
    job = end.job
    qtbot.keyClick(end, Qt.Key.Key_Escape)  # back to the study while the computation is held
    assert isinstance(window.page, StudyOverview)
    qtbot.waitUntil(lambda: not shiboken6.isValid(end))  # the end screen is gone
    with qtbot.waitSignal(job.finished, timeout=30_000) as answer:
        gated.gate.set()
    assert answer.args[0] is not None and answer.args[0].partners == ("ben",)  # computed, then dropped
    qtbot.wait(50)  # let the queued answer reach every connection
    assert isinstance(window.page, StudyOverview) and window.error_bar.isHidden()


def test_an_error_while_computing_shows_one_line_and_is_logged(qtbot, paired_window, monkeypatch):
    window, _ = paired_window
    gated = GatedAgreement(fail=True)
    monkeypatch.setattr(main_window_module, "partner_agreement", gated)
    end = end_session(qtbot, window)
    with qtbot.waitSignal(end.failed, timeout=30_000):
        gated.gate.set()
    assert not end.busy.isVisible() and end.agreement.text() == FAILED
    line = window.error_bar.text()
    assert window.error_bar.isVisible() and "\n" not in line
    assert "RuntimeError: the bootstrap ran out of memory." in line and "second line" not in line
    log = (window.study.dir / ERROR_LOG).read_text(encoding="utf-8")
    assert "Traceback" in log and "in __call__" in log and "second line of detail" in log  # the whole trace
    qtbot.keyClick(end, Qt.Key.Key_Return)  # the screen still takes keys
    assert isinstance(window.page, StudyOverview)


def test_the_real_agreement_arrives_without_a_gate_and_a_solo_end_computes_nothing(qtbot, paired_window):
    window, codes = paired_window
    end = end_session(qtbot, window)
    qtbot.waitUntil(lambda: end.agreement.text().startswith("Agreement with ben"), timeout=30_000)
    expected = cohen_kappa_score(codes["ana"]["affect"], codes["ben"]["affect"])  # reference: scikit-learn
    assert f"affect: kappa {expected:.3f}" in end.agreement.text()
    qtbot.keyClick(end, Qt.Key.Key_Return)
    window.session = LiveSession.start(window.study, window.store, window.clock, coder="ana", device="laptop-1")
    window.show_observing()
    solo = end_session(qtbot, window)
    assert solo.job is None and solo.busy.isHidden() and solo.agreement.text() == ""
