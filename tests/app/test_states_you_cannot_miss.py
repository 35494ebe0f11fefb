"""States a coder cannot miss in a noisy room: pause, whose code was saved, wrong keys, undo, missed windows, zones.

Driven through the real observing widget with real key presses (pytest-qt, offscreen).
Zone abbreviations: Europe/Berlin is CET (UTC+1) in early March 2026, before the EU
summer-time switch on the last Sunday of March (Directive 2000/84/EC, Art. 2).
"""
from __future__ import annotations

import pytest
from PySide6.QtCore import Qt

from observer_app.coding.clock import FakeClock
from observer_app.coding.live import LiveSession
from observer_app.study.folder import load_study
from observer_app.study.store import Store
from observer_app.ui.main_window import MainWindow
from observer_app.ui.observing import ObservingScreen
from tests.app.conftest import make_study


@pytest.fixture
def screen(qtbot, tmp_path):
    study = load_study(make_study(tmp_path / "study"))
    store = Store(study.store_path)
    clock = FakeClock()
    session = LiveSession.start(study, store, clock, coder="ana", device="laptop-1")
    widget = ObservingScreen(session)
    qtbot.addWidget(widget)
    widget.resize(1280, 760)
    widget.show()
    qtbot.waitExposed(widget)
    widget.setFocus()
    yield widget, clock
    widget.timer.stop()
    store.close()


def key(qtbot, widget, name) -> None:
    if isinstance(name, str):
        qtbot.keyClicks(widget, name)
    else:
        qtbot.keyClick(widget, name)


def test_paused_covers_the_whole_screen_with_the_word_and_the_key(qtbot, screen):
    widget, _ = screen
    key(qtbot, widget, Qt.Key.Key_Space)
    cover = widget.pause_cover
    assert cover.isVisible() and cover.geometry() == widget.rect()
    assert "PAUSED" in cover.text() and "<b>Space</b>" in cover.text() and "Bench 1" in cover.text()
    key(qtbot, widget, "1")  # a code key while paused codes nothing
    assert widget.session.state().coded == {}
    key(qtbot, widget, Qt.Key.Key_Space)
    assert not cover.isVisible()


def test_the_confirmation_names_the_learner_it_belongs_to(qtbot, screen):
    widget, _ = screen
    key(qtbot, widget, "1q")  # both dimensions of Bench 1: solo moves on to Bench 2 at once
    assert widget.learner_label.text() == "Bench 2"
    assert "Bench 1" in widget.message_label.text() and "Focused" in widget.message_label.text()


def test_an_unknown_key_shows_a_short_hint(qtbot, screen):
    widget, _ = screen
    key(qtbot, widget, "z")
    assert "'z'" in widget.message_label.text() and "F1" in widget.message_label.text()
    key(qtbot, widget, Qt.Key.Key_F2)
    assert "That key" in widget.message_label.text()
    key(qtbot, widget, "1")
    assert "z" not in widget.message_label.text()


def test_undo_names_the_codes_label_and_counters_count_windows(qtbot, screen):
    widget, _ = screen
    key(qtbot, widget, "1")
    assert "Windows coded: <b>1</b>" in widget.status_label.text()
    key(qtbot, widget, "2")  # a correction in the same window: still one window
    assert "Windows coded: <b>1</b>" in widget.status_label.text()
    key(qtbot, widget, Qt.Key.Key_Backspace)
    assert "Discussing the task" in widget.message_label.text() and "task_discussion" not in widget.message_label.text()
    assert "Windows coded: <b>0</b>" in widget.status_label.text()
    assert widget.session.state().saved_count == 3  # rows: code, correction, retraction (the audit trail)


def test_a_window_that_ran_out_uncoded_is_shown_and_counted(qtbot, screen):
    widget, clock = screen
    clock.advance(20.5)
    widget.session.tick()
    assert widget.learner_label.text() == "Bench 2"
    assert "Time ran out" in widget.message_label.text() and "Bench 1" in widget.message_label.text()
    assert "<b>1</b> ran out uncoded" in widget.status_label.text()
    assert widget.session.summary().missed_windows == widget.session.state().missed_windows == 1


def test_times_on_screen_are_in_the_studys_zone_with_its_abbreviation(qtbot, screen, tmp_path):
    widget, _ = screen
    key(qtbot, widget, "1")
    assert "last save 09:00:00 CET" in widget.status_label.text()  # 08:00 UTC = 09:00 CET
    key(qtbot, widget, Qt.Key.Key_F5)
    assert widget.message_label.text() == "Sync mark at 09:00:00 CET"
    assert "UTC" not in widget.message_label.text()


def test_overview_names_replay_sessions_and_writes_zones(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    study = load_study(folder)
    clock = FakeClock()
    with Store(study.store_path) as store:
        store.start_session(coder="ana", device="laptop-1", mode="replay", started_at=clock.now_utc(),
                            monotonic_start=0.0, window_seconds=20, order="time", seed=0,
                            scheme_hash=study.scheme.content_hash)
    window = MainWindow(folder, clock=clock, device="laptop-1")
    qtbot.addWidget(window)
    table = window.overview.sessions_table
    assert table.item(0, 2).text() == "replay"
    assert table.item(0, 3).text() == "2026-03-09 09:00 CET"


def test_f6_reaches_the_window_even_without_an_active_window_and_is_no_unknown_key(qtbot, tmp_path):
    folder = make_study(tmp_path / "study")
    window = MainWindow(folder, clock=FakeClock(), device="laptop-1")
    qtbot.addWidget(window)
    window.show()
    with Store(load_study(folder).store_path) as store:
        window.session = LiveSession.start(load_study(folder), store, FakeClock(), coder="ana", device="laptop-1")
        window.show_observing()
        screen = window.page
        before = window.theme
        qtbot.keyClick(screen, Qt.Key.Key_F6)  # straight to the widget, as when no shortcut fires
        assert window.theme is not before and "not a key" not in screen.message_label.text()
        screen.timer.stop()


def test_fields_the_chosen_mode_does_not_use_look_unavailable(qtbot, tmp_path):
    """Solo mode needs no pairing code and no shared start: those fields are disabled and must
    look it (the app's style sheet painted disabled fields like live ones), and look live again
    in the mode that uses them."""
    from PySide6.QtGui import QColor

    from observer_app.ui.start_form import PAIRED_TYPED
    from observer_app.ui.theme import LIGHT

    window = MainWindow(make_study(tmp_path / "study"), clock=FakeClock(), device="laptop-1")
    qtbot.addWidget(window)
    window.resize(1280, 800)
    window.show()
    qtbot.waitExposed(window)
    qtbot.keyClick(window.page, Qt.Key.Key_S)
    form = window.page

    def field_colour(widget) -> str:
        image = widget.grab().toImage()
        return QColor(image.pixel(image.width() - 12, image.height() // 2)).name().upper()

    assert not form.pairing.isEnabled() and not form.shared_start.isEnabled()  # solo
    assert field_colour(form.pairing) == LIGHT.background.upper() != LIGHT.surface.upper()
    form.mode.setCurrentText(PAIRED_TYPED)
    assert form.pairing.isEnabled() and field_colour(form.pairing) == LIGHT.surface.upper()
