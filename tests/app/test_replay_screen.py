"""The replay screen, driven by the keyboard alone (offscreen Qt)."""
from __future__ import annotations

import shutil
import threading
import zoneinfo
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import QThreadPool, Qt
from PySide6.QtWidgets import QApplication

from demo_sessions import committed_copy
from observer_app.coding.replay import ReplaySession
from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from observer_app.ui.main_window import MainWindow
from observer_app.ui.overview import StudyOverview
from observer_app.ui.replay import ReplayScreen
from tests.app.conftest import replay_start_form

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"


@pytest.fixture
def demo(tmp_path):
    """A private copy of the committed demo study (never opened in place)."""
    return load_study(shutil.copytree(committed_copy(), tmp_path / "study"))


@pytest.fixture
def screen(qtbot, demo):
    store = Store(demo.store_path)
    session = ReplaySession.start(demo, store, FakeClock(), coder="rhea", device="laptop-r",
                                  learners=["L02", "L09"], sample=4, seed=11)
    widget = ReplayScreen(session)
    qtbot.addWidget(widget)
    widget.resize(1280, 860)
    widget.show()
    qtbot.waitExposed(widget)
    widget.setFocus()
    yield widget
    store.close()


def test_a_whole_replay_coded_with_the_keyboard(qtbot, screen):
    session = screen.session
    clips = session.clips
    first = session.state()
    assert screen.learner_label.text() == first.label == session.label(str(clips["learner"][0]))
    assert screen.events_table.rowCount() == clips["events"][0] == len(first.events)
    for key in "1q":
        qtbot.keyClick(screen, key)
    qtbot.keyClick(screen, "2")
    qtbot.keyClick(screen, Qt.Key.Key_Backspace)  # undo the 2: a retraction row
    assert "Undone activity" in screen.message_label.text()
    for key in "3w":
        qtbot.keyClick(screen, key)
    qtbot.keyClick(screen, Qt.Key.Key_Return)  # a note for clip 3
    qtbot.keyClicks(screen.note_edit, "checked the meter twice")
    qtbot.keyClick(screen.note_edit, Qt.Key.Key_Return)
    qtbot.keyClick(screen, Qt.Key.Key_F8)  # clip 3: could not observe, both dimensions
    qtbot.keyClick(screen, Qt.Key.Key_PageDown)  # clip 4 skipped
    assert session.state().finished and "EVERY CLIP IS DONE" in screen.caption.text()
    qtbot.keyClick(screen, Qt.Key.Key_F10)
    with qtbot.waitSignal(screen.ended, timeout=1000):
        qtbot.keyClick(screen, Qt.Key.Key_F10)
    store = session.store
    rows = store.observations(session.study.scheme.dimension_names).set_index("clip")
    assert rows.loc[clips["clip"][0], ["activity", "affect"]].tolist() == ["on_task", "focused"]
    assert rows.loc[clips["clip"][1], ["activity", "affect"]].tolist() == ["off_task", "confused"]
    assert rows.loc[clips["clip"][2], ["activity", "affect"]].tolist() == ["not_visible", "unclear"]
    assert rows.loc[clips["clip"][2], "note"] == "checked the meter twice"
    assert bool(rows.loc[clips["clip"][3], "no_code"])
    log = store.codes_log()
    retracted = log[log["code"].isna()]
    assert len(retracted) == 1
    assert log.loc[log["code_id"] == retracted["supersedes"].iloc[0], "code"].iloc[0] == "task_discussion"


def test_the_events_table_follows_the_clip_and_stays_while_it_is_coded(qtbot, screen):
    clips = screen.session.clips
    table = screen.events_table
    first = [table.item(row, 1).text() for row in range(table.rowCount())]
    assert len(first) == clips["events"][0]
    qtbot.keyClick(screen, "1")  # the same clip: the table keeps its rows
    assert [table.item(row, 1).text() for row in range(table.rowCount())] == first
    qtbot.keyClick(screen, "q")  # clip 1 done: clip 2's events
    state = screen.session.state()
    assert state.position == 1 and table.rowCount() == clips["events"][1] == len(state.events)
    assert [table.item(row, 0).text() for row in range(table.rowCount())] == [
        f"{offset:.1f} s" for offset in state.events["offset_s"]]
    qtbot.keyClick(screen, Qt.Key.Key_Backspace)  # back to clip 1: its events again
    assert [table.item(row, 1).text() for row in range(table.rowCount())] == first


def test_the_replay_screen_screenshot(qtbot, screen):
    """Saved to tests/artifacts/ so anyone can look at it (not committed)."""
    qtbot.keyClick(screen, "1")
    state = screen.session.state()
    assert screen.status_label.text().count("still to code: Affect") == 1
    # The clip's range is shown in the study's zone (zoneinfo, IANA tz database), on the log's clock.
    zone = zoneinfo.ZoneInfo(screen.session.study.timezone)
    local_start, local_end = state.start.astimezone(zone), state.end.astimezone(zone)
    assert f"{local_start:%H:%M:%S} – {local_end:%H:%M:%S}" in screen.range_label.text()
    assert (state.end - state.start).total_seconds() == screen.session.study.window_seconds
    ARTIFACTS.mkdir(exist_ok=True)
    screen.grab().save(str(ARTIFACTS / "replay.png"))
    qtbot.keyClick(screen, Qt.Key.Key_F1)
    assert screen.help.isVisible() and "PgDn" in screen.help.text()
    screen.grab().save(str(ARTIFACTS / "replay_keys.png"))


def test_the_start_form_replay_choice_opens_the_replay_screen_and_resumes(qtbot, tmp_path):
    folder = shutil.copytree(committed_copy(), tmp_path / "study")
    window = MainWindow(folder, clock=FakeClock(), device="laptop-r")
    qtbot.addWidget(window)
    window.show()
    qtbot.waitExposed(window)
    window.activateWindow()

    def start_replay() -> ReplayScreen:
        qtbot.keyClick(window.page, Qt.Key.Key_S)  # overview -> start form
        form = window.page
        qtbot.keyClicks(form.coder, "rhea")
        form.mode.setFocus()
        for _ in range(3):  # solo -> paired (countdown) -> paired (typed time) -> replay
            qtbot.keyClick(form.mode, Qt.Key.Key_Down)
        qtbot.keyClick(QApplication.focusWidget() or form, Qt.Key.Key_Return)
        qtbot.waitUntil(lambda: isinstance(window.page, ReplayScreen), timeout=20_000)  # logs read off the UI thread
        return window.page

    replay = start_replay()
    clips = replay.session.clips  # the default plan: 5 clips of each ticked learner, not all 730
    assert len(clips) == 60 and clips.groupby("learner").size().eq(5).all()
    sessions = replay.session.store.sessions()
    assert sessions.loc[sessions["coder"] == "rhea", "order"].str.startswith("plan:").all()
    for key in "1q2w":
        qtbot.keyClick(replay, key)
    assert replay.session.state().position == 2
    window.close()  # no end row: the replay stays open in the store

    window = MainWindow(folder, clock=FakeClock(), device="laptop-r")
    qtbot.addWidget(window)
    window.show()
    qtbot.waitExposed(window)
    resumed = start_replay()
    assert resumed.session.session_id == replay.session.session_id
    assert resumed.session.state().position == 2 and "Resumed at clip 3" in resumed.message_label.text()


def test_a_log_that_cannot_be_read_is_one_line_on_the_start_form(qtbot, tmp_path):
    from tests.app.conftest import make_study

    folder = make_study(tmp_path / "study")  # declares logs/centre_north.csv, which is not there
    window, form = replay_start_form(qtbot, folder)
    qtbot.keyClick(form.coder, Qt.Key.Key_Return)
    qtbot.waitUntil(lambda: "centre_north.csv" in form.error.text(), timeout=20_000)
    assert window.page is form and "\n" not in form.error.text() and not form.busy.isVisible()
    with Store(load_study(folder).store_path) as store:
        assert store.sessions().empty  # nothing half-written


class GatedRead:
    """The real roster read, held until ``gate`` opens; notes the threads it ran on."""

    def __init__(self, real) -> None:
        self.real, self.gate, self.threads = real, threading.Event(), []

    def __call__(self, study):
        self.threads.append(threading.get_ident())
        assert self.gate.wait(20)
        return self.real(study)


def _replay_form_submitted(qtbot, tmp_path, monkeypatch):
    from observer_app.ui import main_window as main_window_module

    read = GatedRead(main_window_module.roster_logs)
    monkeypatch.setattr(main_window_module, "roster_logs", read)
    window, form = replay_start_form(qtbot, shutil.copytree(committed_copy(), tmp_path / "study"))
    qtbot.keyClick(form.coder, Qt.Key.Key_Return)
    return window, form, read


def test_the_start_form_shows_it_is_busy_while_replay_reads_the_logs(qtbot, tmp_path, monkeypatch):
    window, form, read = _replay_form_submitted(qtbot, tmp_path, monkeypatch)
    qtbot.waitUntil(lambda: len(read.threads) == 1)
    assert window.page is form and form.busy.isVisible() and "Reading" in form.busy_label.text()
    assert read.threads[0] != threading.get_ident()  # not on the UI thread
    qtbot.keyClick(form.coder, Qt.Key.Key_Return)  # a second Enter starts nothing more
    read.gate.set()
    qtbot.waitUntil(lambda: isinstance(window.page, ReplayScreen), timeout=20_000)
    assert len(read.threads) == 1
    sessions = window.page.session.store.sessions()
    assert (sessions["mode"] == "replay").sum() == 1


def test_going_back_while_the_logs_are_read_starts_no_replay(qtbot, tmp_path, monkeypatch):
    window, form, read = _replay_form_submitted(qtbot, tmp_path, monkeypatch)
    qtbot.waitUntil(lambda: len(read.threads) == 1)
    qtbot.keyClick(form.coder, Qt.Key.Key_Escape)
    assert isinstance(window.page, StudyOverview)
    read.gate.set()
    QThreadPool.globalInstance().waitForDone()
    qtbot.wait(50)  # the late answer's delivery
    assert isinstance(window.page, StudyOverview)
    assert (window.store.sessions()["mode"] == "replay").sum() == 0  # nothing written for the abandoned start


def test_the_status_line_counts_a_clip_of_one_event_in_the_singular(qtbot, demo):
    with Store(demo.store_path) as store:
        session = ReplaySession.start(demo, store, FakeClock(), coder="rhea", device="laptop-r", learners=["L07"])
        clips = session.clips
        single = int(np.flatnonzero(clips["events"].to_numpy() == 1)[0])  # the first clip of one event
        widget = ReplayScreen(session)
        qtbot.addWidget(widget)
        widget.show()
        widget.setFocus()
        for _ in range(single):
            qtbot.keyClick(widget, Qt.Key.Key_PageDown)  # skip to it
        assert session.state().position == single
        assert "· 1 event ·" in widget.status_label.text()
        qtbot.keyClick(widget, Qt.Key.Key_PageDown)
        many = int(clips["events"].iloc[single + 1])
        assert f"· {many} event{'' if many == 1 else 's'} ·" in widget.status_label.text()
        widget.close()
