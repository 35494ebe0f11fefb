"""The real widgets, driven with the keyboard alone (pytest-qt, offscreen).

Keys go to whatever widget has the keyboard focus, as they would on a real screen,
so a screen that loses focus fails these tests.  The store is read back with sqlite3.
"""
from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QApplication

from observer_app.coding.live import LiveSession
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from observer_app.ui import theme
from observer_app.ui.clock_check import ClockCheck
from observer_app.ui.end_screen import EndScreen
from observer_app.ui.main_window import MainWindow
from observer_app.ui.observing import ObservingScreen
from observer_app.ui.overview import StudyOverview
from observer_app.ui.start_form import StartForm
from tests.app.conftest import make_study

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"


def focused(window):
    return QApplication.focusWidget() or window.page


def press(qtbot, window, key, text: str | None = None) -> None:
    """One key press on the focused widget."""
    target = focused(window)
    if text is not None:
        qtbot.keyClicks(target, text)
    else:
        qtbot.keyClick(target, key)


@pytest.fixture
def window(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    clock = FakeClock()
    app_window = MainWindow(folder, clock=clock, device="laptop-1")
    qtbot.addWidget(app_window)
    app_window.show()
    qtbot.waitExposed(app_window)
    app_window.activateWindow()
    return app_window


def test_a_whole_session_coded_with_the_keyboard_alone(qtbot, window):
    clock = window.clock
    assert isinstance(window.page, StudyOverview)
    press(qtbot, window, Qt.Key.Key_S)
    assert isinstance(window.page, StartForm)
    press(qtbot, window, None, "ana")
    press(qtbot, window, Qt.Key.Key_Tab)
    press(qtbot, window, Qt.Key.Key_Tab)
    press(qtbot, window, Qt.Key.Key_Tab)  # mode stays solo; the shared start is disabled so Tab skips it
    press(qtbot, window, Qt.Key.Key_Down)  # present list: second learner
    press(qtbot, window, Qt.Key.Key_Space)  # untick Bench 2
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ClockCheck)
    clock.advance(1.5)
    press(qtbot, window, Qt.Key.Key_M)
    # the study is in Europe/Berlin: the mark is shown on its clock, with the zone's abbreviation
    mark = window.page.session.store.sync_marks()["marked_at"].iloc[-1].tz_convert("Europe/Berlin")
    assert window.page.marks.text() == f"Sync marks stored at {mark:%H:%M:%S}.{mark.microsecond // 1000:03d} {mark:%Z}"
    assert mark.strftime("%Z") in ("CET", "CEST") and "UTC" not in window.page.marks.text()
    press(qtbot, window, Qt.Key.Key_Return)
    screen = window.page
    assert isinstance(screen, ObservingScreen)
    assert screen.learner_label.text() == "Bench 1"
    assert screen.next_label.text() == "Bench 3"  # Bench 2 was left unticked

    for activity, affect in ["1q", "3e", "2w", "1q", "5t"]:  # Bench 1, 3, 4, 5, 6
        clock.advance(4)
        press(qtbot, window, None, activity)
        clock.advance(2)
        press(qtbot, window, None, affect)
    assert screen.learner_label.text() == "Bench 1"  # round two
    press(qtbot, window, None, "4")
    press(qtbot, window, Qt.Key.Key_Backspace)  # undo the 4
    assert "still to code: Activity, Affect" in screen.status_label.text()
    press(qtbot, window, Qt.Key.Key_Return)  # note
    press(qtbot, window, None, "swapped the breaker twice")
    press(qtbot, window, Qt.Key.Key_Return)
    press(qtbot, window, Qt.Key.Key_F8)  # could not observe: both dimensions
    assert screen.learner_label.text() == "Bench 3"
    press(qtbot, window, Qt.Key.Key_F3)  # Bench 3 leaves
    assert screen.learner_label.text() == "Bench 4"
    assert focused(window) is screen
    press(qtbot, window, Qt.Key.Key_Space)
    assert "PAUSED" in screen.turn_caption.text()
    press(qtbot, window, None, "1")  # ignored while paused
    press(qtbot, window, Qt.Key.Key_Space)
    clock.advance(21)
    screen.session.tick()  # the window ran out: Bench 4 missed
    assert screen.learner_label.text() == "Bench 5"
    press(qtbot, window, Qt.Key.Key_F5)
    press(qtbot, window, Qt.Key.Key_F10)
    assert isinstance(window.page, ObservingScreen)  # one press only asks
    press(qtbot, window, Qt.Key.Key_F10)
    end = window.page
    assert isinstance(end, EndScreen)
    assert "8 windows" in end.figures.text() and "2 missed" in end.figures.text()  # Bench 3 left, Bench 4 ran out
    table = end.table
    headers = [table.horizontalHeaderItem(c).text().replace("\n", " ") for c in range(table.columnCount())]
    rows = {table.item(r, 0).text(): dict(zip(headers[1:], (table.item(r, c).text() for c in range(1, table.columnCount()))))
            for r in range(table.rowCount())}
    assert table.item(0, 0).text() == "All learners" and table.item(1, 0).text() == "Bench 1"
    assert "Bench 2" not in rows  # absent from the session: the end screen lists only learners it observed
    assert rows["Bench 1"]["Working on the panel"] == "1" and rows["All learners"]["Working on the panel"] == "2"
    assert rows["All learners"]["Could not tell"] == "2"  # Bench 6 by key, Bench 1 by F8
    assert rows["Bench 4"]["Missed (no code)"] == "1"
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, StudyOverview)

    with sqlite3.connect(window.study.store_path) as connection:
        codes = connection.execute("SELECT o.learner, c.dimension, c.code FROM codes c "
                                   "JOIN observations o USING (observation_id) ORDER BY c.rowid").fetchall()
        assert codes[:4] == [("L01", "activity", "on_task"), ("L01", "affect", "focused"),
                             ("L03", "activity", "off_task"), ("L03", "affect", "frustrated")]
        assert ("L01", "activity", None) in codes  # the undo is a retraction row
        assert connection.execute("SELECT text FROM notes").fetchall() == [("swapped the breaker twice",)]
        assert connection.execute("SELECT learner, state FROM absences").fetchall() == [("L03", "absent")]
        assert connection.execute("SELECT count(*) FROM sync_marks").fetchone() == (2,)
        assert connection.execute("SELECT present FROM sessions").fetchone() == ("L01\nL03\nL04\nL05\nL06",)
        assert connection.execute("SELECT count(*) FROM session_ends").fetchone() == (1,)


def test_the_end_screen_counts_one_window_and_one_sync_mark_in_the_singular(qtbot, window):
    press(qtbot, window, Qt.Key.Key_S)
    press(qtbot, window, None, "ana")
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ClockCheck)
    press(qtbot, window, Qt.Key.Key_M)
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ObservingScreen)
    press(qtbot, window, None, "1")
    press(qtbot, window, None, "q")  # Bench 1 coded in both dimensions: the first window closes
    press(qtbot, window, Qt.Key.Key_F10)
    press(qtbot, window, Qt.Key.Key_F10)
    assert isinstance(window.page, EndScreen)
    text = window.page.figures.text()
    assert text.startswith("1 window  ·  1 coded  ·  0 missed") and text.endswith("·  1 sync mark"), text


def _paired_form(qtbot, window, downs: int):
    press(qtbot, window, Qt.Key.Key_S)
    form = window.page
    press(qtbot, window, None, "ben")
    form.mode.setFocus()
    for _ in range(downs):
        press(qtbot, window, Qt.Key.Key_Down)
    return form


def test_paired_start_typed_in_the_form_needs_a_small_typed_clock_difference(qtbot, window):
    form = _paired_form(qtbot, window, 2)  # paired, typed time
    press(qtbot, window, Qt.Key.Key_Tab)
    assert focused(window) is form.pairing  # the code shown here is read to the partner
    press(qtbot, window, Qt.Key.Key_Tab)
    assert focused(window) in (form.shared_start, form.shared_start.lineEdit())
    form.shared_start.lineEdit().selectAll()
    press(qtbot, window, None, "9:05")  # 08:05 UTC in Berlin on 9 March (CET, UTC+1; EU summer time starts 29 March)
    press(qtbot, window, Qt.Key.Key_Return)
    check = window.page
    assert isinstance(check, ClockCheck) and check.session is None
    assert focused(window) is check.difference
    press(qtbot, window, None, "3")
    press(qtbot, window, Qt.Key.Key_Return)
    assert window.page is check and "more than the 1 s" in check.error.text()  # refused, the signal offered
    ARTIFACTS.mkdir(exist_ok=True)
    check.grab().save(str(ARTIFACTS / "clock_check_typed_refused.png"))
    with sqlite3.connect(window.study.store_path) as connection:
        assert connection.execute("SELECT count(*) FROM sessions").fetchone()[0] == 0
    check.difference.selectAll()
    press(qtbot, window, None, "-0.5")
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ObservingScreen)
    with sqlite3.connect(window.study.store_path) as connection:
        paired_ns, pairing_id, typed = connection.execute(
            "SELECT paired_start_ns, pairing_id, typed_clock_difference_s FROM sessions").fetchone()
    assert paired_ns == 1773043500 * 10**9  # 2026-03-09T08:05:00Z as Unix seconds (date -d ... +%s)
    assert pairing_id == form.pairing.text() and typed == -0.5


def test_signal_start_from_the_form_anchors_on_the_enter_key(qtbot, window):
    form = _paired_form(qtbot, window, 1)  # paired, spoken countdown
    press(qtbot, window, Qt.Key.Key_Tab)
    form.pairing.selectAll()
    press(qtbot, window, None, "km7-qx")  # the code the partner read out
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ClockCheck) and window.page.session.pairing_id == "KM7QX"
    press(qtbot, window, Qt.Key.Key_Return)
    screen = window.page
    assert isinstance(screen, ObservingScreen)
    assert "KM7QX" in screen.turn_caption.text() and screen.time_label.text() == "ready"
    press(qtbot, window, Qt.Key.Key_F7)
    screen.session.tick()
    assert screen.time_label.text() == "3"
    ARTIFACTS.mkdir(exist_ok=True)
    screen.grab().save(str(ARTIFACTS / "observing_waiting_for_signal.png"))
    window.clock.advance(3.2)
    screen.session.tick()
    assert screen.time_label.text() == "now"
    press(qtbot, window, Qt.Key.Key_Return)  # on "now"
    state = screen.session.state()
    assert not state.awaiting_signal and state.check_code in screen.turn_caption.text()
    window.clock.advance(25)
    press(qtbot, window, Qt.Key.Key_F9)  # the closing countdown's "now"
    with sqlite3.connect(window.study.store_path) as connection:
        marks = connection.execute("SELECT kind, pairing_id FROM sync_marks ORDER BY marked_ns").fetchall()
    assert marks == [("signal start", "KM7QX"), ("signal end", "KM7QX")]
    ARTIFACTS.mkdir(exist_ok=True)
    screen.grab().save(str(ARTIFACTS / "observing_paired_signal.png"))


def test_a_refused_typed_start_can_switch_to_the_signal(qtbot, window):
    _paired_form(qtbot, window, 2)
    press(qtbot, window, Qt.Key.Key_Return)
    assert isinstance(window.page, ClockCheck) and window.page.session is None
    press(qtbot, window, Qt.Key.Key_F2)
    assert isinstance(window.page, ClockCheck) and window.page.session is not None
    assert window.page.session.state().awaiting_signal


def test_interrupted_session_is_offered_and_resumed_from_the_overview(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    study = load_study(folder)
    clock = FakeClock()
    with Store(study.store_path) as store:
        session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1", typed_clock_difference_s=0.0, paired_start=clock.now_utc())
        session.press("1")
    clock.advance(50)
    window = MainWindow(folder, clock=clock, device="laptop-1")
    qtbot.addWidget(window)
    window.show()
    assert "interrupted" in window.overview.resume_banner.text()
    ARTIFACTS.mkdir(exist_ok=True)
    window.overview.grab().save(str(ARTIFACTS / "overview_resume_offer.png"))
    scroll = window.overview.counts_table.verticalScrollBar()
    press(qtbot, window, Qt.Key.Key_PageDown)
    assert scroll.maximum() == 0 or scroll.value() > 0  # the learners table scrolls from the keyboard
    press(qtbot, window, Qt.Key.Key_R)
    screen = window.page
    assert isinstance(screen, ObservingScreen)
    assert screen.session.session_id == session.session_id
    assert screen.learner_label.text() == "Bench 3"  # 50 s / 20 s -> slot 2, the third bench
    assert "slot 3" in screen.slot_label.text()


def test_help_overlay_lists_every_code_key(qtbot, window):
    press(qtbot, window, Qt.Key.Key_S)
    press(qtbot, window, None, "ana")
    press(qtbot, window, Qt.Key.Key_Return)
    press(qtbot, window, Qt.Key.Key_Return)
    screen = window.page
    press(qtbot, window, Qt.Key.Key_F1)
    assert screen.help.isVisible()
    text = screen.help.text()
    for code in [c for d in window.study.scheme.dimensions for c in d.codes]:
        assert f"<b>{code.key.upper()}</b></td><td>{code.label}</td>" in text
    press(qtbot, window, Qt.Key.Key_Escape)
    assert not screen.help.isVisible()
    press(qtbot, window, Qt.Key.Key_F6)
    assert window.theme is theme.DISCREET and screen.theme is theme.DISCREET


def test_screenshots_of_the_observing_screen_and_overview(qtbot, window):
    """Saved to tests/artifacts/ so anyone can look at them (not committed)."""
    ARTIFACTS.mkdir(exist_ok=True)
    window.resize(1280, 800)
    window.overview.grab().save(str(ARTIFACTS / "overview.png"))
    press(qtbot, window, Qt.Key.Key_S)
    press(qtbot, window, None, "ana")
    press(qtbot, window, Qt.Key.Key_Return)
    window.clock.advance(0.4)
    window.page.grab().save(str(ARTIFACTS / "clock_check.png"))
    press(qtbot, window, Qt.Key.Key_Return)
    screen = window.page
    for keys in ("1q", "2w"):
        window.clock.advance(5)
        press(qtbot, window, None, keys)
    window.clock.advance(7.4)
    press(qtbot, window, None, "3")
    screen.session.tick()
    saved = []
    for name in ("observing", "observing_discreet"):
        path = ARTIFACTS / f"{name}.png"
        qtbot.wait(50)  # let pending layout requests run, as the event loop would
        assert screen.grab().save(str(path))
        saved.append(path)
        press(qtbot, window, Qt.Key.Key_F6)
    press(qtbot, window, Qt.Key.Key_F1)
    screen.grab().save(str(ARTIFACTS / "observing_keys.png"))
    press(qtbot, window, Qt.Key.Key_Escape)
    press(qtbot, window, Qt.Key.Key_F10)
    press(qtbot, window, Qt.Key.Key_F10)
    window.page.grab().save(str(ARTIFACTS / "end_of_session.png"))
    press(qtbot, window, Qt.Key.Key_Return)
    qtbot.wait(50)
    window.overview.grab().save(str(ARTIFACTS / "overview_after_session.png"))
    for path in saved:
        assert path.stat().st_size > 10_000


def test_without_a_study_the_app_offers_to_open_or_create_one_and_shows_the_cautions(qtbot, tmp_path):
    window = MainWindow(None, clock=FakeClock())
    qtbot.addWidget(window)
    window.show()
    page = window.page
    texts = " ".join(label.text() for label in page.findChildren(type(page.error)))
    assert "open a study folder" in texts and "create a new study" in texts
    assert "ethics approval" in texts and "minors" in texts and "sole basis" in texts
    window.open_study(tmp_path / "missing")
    assert window.page is page and "fieldmark init" in page.error.text()


def test_presence_list_marks_absent_and_back_from_the_keyboard(qtbot, window):
    press(qtbot, window, Qt.Key.Key_S)
    press(qtbot, window, None, "ana")
    press(qtbot, window, Qt.Key.Key_Return)
    press(qtbot, window, Qt.Key.Key_Return)
    screen = window.page
    press(qtbot, window, Qt.Key.Key_F4)
    assert screen.presence_panel.isVisible()
    press(qtbot, window, Qt.Key.Key_Down)
    press(qtbot, window, Qt.Key.Key_Return)  # Bench 2 is absent
    assert screen.presence.item(1).text().endswith("ABSENT")
    assert screen.next_label.text() == "Bench 3"
    press(qtbot, window, Qt.Key.Key_Return)  # and back again
    press(qtbot, window, Qt.Key.Key_Escape)
    assert not screen.presence_panel.isVisible() and focused(window) is screen
    assert screen.next_label.text() == "Bench 2"
    with sqlite3.connect(window.study.store_path) as connection:
        assert connection.execute("SELECT learner, state FROM absences ORDER BY rowid").fetchall() == [
            ("L02", "absent"), ("L02", "returned")]


# A solo session's first window starts when the coder first sees the learner: time on the
# clock check must not eat the first learner's window, nor close windows as missed while
# nobody was watching (common practice: every learner gets the study's whole window).
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
