"""No silent failure: slot exceptions are shown and logged; only this device's own sessions resume."""
from __future__ import annotations

import stat
import sys

import pytest
from PySide6.QtCore import Qt

from observer_app.coding.clock import FakeClock
from observer_app.coding.live import LiveSession
from observer_app.study.folder import load_study
from observer_app.study.store import Store
from observer_app.ui.main_window import MainWindow
from observer_app.ui.observing import ObservingScreen
from observer_app.ui.slot_errors import ERROR_LOG, report_slot_errors
from tests.app.conftest import make_study
from tests.app.test_app_window import press
from tests.conftest import call_cli

CSV = """coder,learner,time,device,activity,affect
ana,L01,2026-03-02T09:15:00+01:00,tablet-9,on_task,focused
ana,L02,2026-03-02T09:15:20+01:00,tablet-9,off_task,
"""


def open_window(qtbot, folder, clock=None, device="laptop-1") -> MainWindow:
    window = MainWindow(folder, clock=clock or FakeClock(), device=device)
    qtbot.addWidget(window)
    window.show()
    qtbot.waitExposed(window)
    window.activateWindow()
    return window


def test_imported_csv_sessions_are_never_offered_for_resume(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    (tmp_path / "codes.csv").write_text(CSV, encoding="utf-8")
    assert call_cli("import", folder, tmp_path / "codes.csv").returncode == 0
    window = open_window(qtbot, folder, device="tablet-9")  # even on the device the CSV names
    assert window.overview.interrupted is None
    assert "interrupted" not in window.overview.resume_banner.text()
    overview = window.page
    press(qtbot, window, Qt.Key.Key_R)
    assert window.page is overview and window.error_bar.isHidden()


def test_resume_is_offered_only_for_this_devices_own_unfinished_session(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    other = make_study(tmp_path / "other")
    clock = FakeClock()
    with Store(load_study(other).store_path) as store:  # another coder's laptop, interrupted
        LiveSession.start(load_study(other), store, clock, coder="ben", device="laptop-2").press("1")
    assert call_cli("import", folder, load_study(other).store_path).returncode == 0
    window = open_window(qtbot, folder, clock)
    assert window.overview.interrupted is None  # merged from laptop-2: not ours to resume
    with Store(load_study(folder).store_path) as store:
        mine = LiveSession.start(load_study(folder), store, clock, coder="ana", device="laptop-1")
        mine.press("1")
    window.overview.refresh()
    assert window.overview.interrupted.session_id == mine.session_id
    press(qtbot, window, Qt.Key.Key_R)
    assert isinstance(window.page, ObservingScreen)


@pytest.mark.qt_no_exception_capture
def test_an_exception_in_a_slot_is_shown_in_one_line_and_logged_owner_only(qtbot, tmp_path, monkeypatch):
    folder = make_study(tmp_path / "study")
    window = open_window(qtbot, folder)
    monkeypatch.setattr(sys, "excepthook", sys.excepthook)  # restored after the test
    report_slot_errors(window)

    def broken() -> None:
        raise RuntimeError("the start form could not be built\nsecond line")

    monkeypatch.setattr(window, "show_start_form", broken)
    window.overview.start_requested.disconnect()
    window.overview.start_requested.connect(window.show_start_form)
    press(qtbot, window, Qt.Key.Key_S)
    assert window.error_bar.isVisible()
    text = window.error_bar.text()
    assert "RuntimeError: the start form could not be built" in text and "second line" not in text
    log = folder / ERROR_LOG
    assert str(log) in text
    assert "Traceback" in log.read_text(encoding="utf-8") and "second line" in log.read_text(encoding="utf-8")
    assert stat.S_IMODE(log.stat().st_mode) == 0o600
