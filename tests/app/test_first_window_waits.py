"""A solo session's first window starts when the coder first sees the learner.

The clock check comes between the start form and the observing screen; time spent on it
must not eat the first learner's window, nor close windows as missed while nobody was
watching (common practice: every learner gets the study's whole window)."""
from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from observer_app.coding.clock import FakeClock
from observer_app.ui.clock_check import ClockCheck
from observer_app.ui.main_window import MainWindow
from observer_app.ui.observing import ObservingScreen
from tests.app.conftest import make_study


@pytest.fixture
def window(qtbot, tmp_path):
    app_window = MainWindow(make_study(tmp_path / "study"), clock=FakeClock(), device="laptop-1")
    qtbot.addWidget(app_window)
    app_window.show()
    qtbot.waitExposed(app_window)
    app_window.activateWindow()
    return app_window


def test_time_on_the_clock_check_is_not_taken_from_the_first_window(qtbot, window):
    qtbot.keyClick(window.page, Qt.Key.Key_S)
    qtbot.keyClicks(window.page.focusWidget(), "ana")
    qtbot.keyClick(window.page.focusWidget(), Qt.Key.Key_Return)
    check = window.page
    assert isinstance(check, ClockCheck)
    window.clock.advance(47.0)  # two whole windows and more, reading the clock and storing a mark
    qtbot.keyClick(check, Qt.Key.Key_M)
    check.session.tick()
    qtbot.keyClick(check, Qt.Key.Key_Return)
    screen = window.page
    assert isinstance(screen, ObservingScreen)
    state = screen.session.state()
    assert state.label == "Bench 1" and state.slot == 0
    assert state.time_left == pytest.approx(state.window_seconds)
    assert not state.paused and state.missed_windows == 0
    assert state.message == "Session started"
    assert screen.session.store.sync_marks().shape[0] == 1  # the mark stored on the check still counts
    window.clock.advance(state.window_seconds + 0.5)
    screen.session.tick()
    assert screen.session.state().label == "Bench 2"  # the schedule runs from the observing screen on
