"""The app window: moves between the screens; owns the open study, its store and the theme.

Flow: choose or create a study -> overview -> start form -> clock check -> observing
-> end of session -> overview.  From the overview an interrupted session resumes
straight into observing.  A replay start (start form, mode "Replay") opens the replay
screen instead, resuming the coder's unfinished replay session if there is one.  Closing the window during a session leaves it open in the
store (no end row), so the next start offers to resume it.
"""
from __future__ import annotations

import socket
from dataclasses import replace
from functools import partial
from pathlib import Path
from types import TracebackType

from PySide6.QtCore import Qt
from PySide6.QtGui import QKeyEvent, QKeySequence, QShortcut
from PySide6.QtWidgets import QFileDialog, QLabel, QMainWindow, QStackedWidget, QVBoxLayout, QWidget

from observer_app.coding.live import LiveSession, SessionSummary, summarise_session
from observer_app.coding.replay import ReplaySession, find_open_replay
from observer_app.pipeline.alignment import roster_logs
from observer_app.coding.end_agreement import partner_agreement
from observer_app.coding.clock import Clock, SystemClock
from observer_app.study.store import Store
from observer_app.study.folder import Study, load_study
from observer_app.study.creation import create_study
from observer_app.ui import theme as looks
from observer_app.ui.background import BackgroundJob, wait_for_background_work
from observer_app.ui.cautions import cautions_html
from observer_app.ui.clock_check import ClockCheck
from observer_app.ui.end_screen import EndScreen
from observer_app.ui.observing import ObservingScreen
from observer_app.ui.overview import StudyOverview
from observer_app.ui.replay import ReplayScreen
from observer_app.ui.slot_errors import append_error_log, error_line
from observer_app.ui.start_form import StartChoice, StartForm
from sync.errors import InputError


class WelcomePage(QWidget):
    """No study given: O opens a study folder, C creates a new one."""

    def __init__(self, window: MainWindow) -> None:
        super().__init__()
        self.window_ = window
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        layout = looks.titled_column(self, "fieldmark", (64, 48, 64, 48))
        self.keys_label = QLabel("<p style='font-size:16pt'><b>O</b> open a study folder<br>"
                                 "<b>C</b> create a new study in an empty folder<br><b>Ctrl+Q</b> quit</p>")
        layout.addWidget(self.keys_label)
        self.error = QLabel("")
        self.error.setProperty("role", "warning")
        self.error.setWordWrap(True)
        layout.addWidget(self.error)
        cautions = QLabel("<b>Before you observe</b>" + cautions_html())
        cautions.setWordWrap(True)
        layout.addWidget(cautions)
        layout.addStretch(1)

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() == Qt.Key.Key_O:
            self.window_.choose_study()
        elif event.key() == Qt.Key.Key_C:
            self.window_.create_study_folder()
        else:
            super().keyPressEvent(event)


class MainWindow(QMainWindow):
    def __init__(self, study_dir: Path | None = None, *, clock: Clock | None = None, device: str | None = None,
                 discreet: bool = False) -> None:
        super().__init__()
        self.clock = clock or SystemClock()
        self.device = device or socket.gethostname()  # the device label sessions are stored with
        self.theme = looks.DISCREET if discreet else looks.LIGHT
        self.study: Study | None = None
        self.store: Store | None = None
        self.session: LiveSession | None = None
        self.overview: StudyOverview | None = None
        self.stack = QStackedWidget()
        self.error_bar = QLabel()
        self.error_bar.setWordWrap(True)
        self.error_bar.hide()
        central = QWidget()
        column = QVBoxLayout(central)
        column.setContentsMargins(0, 0, 0, 0)
        column.setSpacing(0)
        column.addWidget(self.error_bar)
        column.addWidget(self.stack, 1)
        self.setCentralWidget(central)
        self.setWindowTitle("fieldmark")
        self.resize(1280, 800)
        # Application-wide: they must work even when no window manager marks the window active.
        for keys, action in ((QKeySequence(Qt.Key.Key_F6), self.toggle_discreet), (QKeySequence("Ctrl+Q"), self.close)):
            QShortcut(keys, self, action, context=Qt.ShortcutContext.ApplicationShortcut)
        self.setStyleSheet(looks.stylesheet(self.theme))
        self._style_error_bar()
        self.welcome = WelcomePage(self)
        if study_dir is None:
            self._show(self.welcome)
        else:
            self.open_study(study_dir)

    # -- pages ----------------------------------------------------------------------------
    def _show(self, page: QWidget) -> None:
        for index in reversed(range(self.stack.count())):
            old = self.stack.widget(index)
            if old is not page and old is not self.overview and old is not self.welcome:
                self.stack.removeWidget(old)
                old.deleteLater()
        if self.stack.indexOf(page) < 0:
            self.stack.addWidget(page)
        self.stack.setCurrentWidget(page)
        page.setFocus()

    def show_error(self, error: BaseException, trace: TracebackType | None) -> None:
        """An exception escaped a slot: one line on screen, the traceback in the study's error log."""
        where = ""
        if self.study is not None:
            try:
                where = f" Details: {append_error_log(self.study.dir, error, trace)}."
            except OSError as failure:
                where = f" (The error log could not be written: {failure}.)"
        self.error_bar.setText(f"Something failed and was not done: {error_line(error)}. "
                               f"Codes already saved are safe.{where}")
        self.error_bar.show()

    def _style_error_bar(self) -> None:
        self.error_bar.setStyleSheet(f"background: {self.theme.warning}; color: #FFFFFF; font-size: 13pt;"
                                     f" padding: 6px 16px;")

    @property
    def page(self) -> QWidget:
        return self.stack.currentWidget()

    def toggle_discreet(self) -> None:
        self.theme = looks.LIGHT if self.theme is looks.DISCREET else looks.DISCREET
        self.setStyleSheet(looks.stylesheet(self.theme))
        self._style_error_bar()
        for index in range(self.stack.count()):
            page = self.stack.widget(index)
            if hasattr(page, "set_theme"):
                page.set_theme(self.theme)

    # -- study ----------------------------------------------------------------------------
    def choose_study(self) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Open a study folder")
        if folder:
            self.open_study(Path(folder))

    def create_study_folder(self) -> None:
        folder = QFileDialog.getExistingDirectory(self, "Choose an empty folder for the new study")
        if not folder:
            return
        try:
            create_study(Path(folder))
        except InputError as error:
            self.welcome.error.setText(error.line())
            return
        self.open_study(Path(folder))

    def open_study(self, folder: Path) -> None:
        try:
            study = load_study(folder)
        except InputError as error:
            self.welcome.error.setText(error.line())
            self._show(self.welcome)
            return
        if self.store is not None:
            self.store.close()
        self.study, self.store = study, Store(study.store_path)
        self.setWindowTitle(f"fieldmark - {study.name}")
        if self.overview is not None:
            self.stack.removeWidget(self.overview)
            self.overview.deleteLater()
        self.overview = StudyOverview(study, self.store, self.device)
        self.overview.start_requested.connect(self.show_start_form)
        self.overview.resume_requested.connect(self.resume_session)
        self.overview.open_requested.connect(self.choose_study)
        self._show(self.overview)

    def show_overview(self) -> None:
        self.overview.refresh()
        self._show(self.overview)

    # -- session --------------------------------------------------------------------------
    def show_start_form(self) -> None:
        form = StartForm(self.study, self.clock, self.device)
        form.started.connect(self.start_session)
        form.cancelled.connect(self.show_overview)
        self._show(form)
        form.coder.setFocus()

    def start_session(self, choice: StartChoice) -> None:
        if choice.replay:
            self.start_replay(choice)
            return
        if choice.paired_start is not None:  # typed start: the clock check comes first and may refuse it
            check = ClockCheck(None, study=self.study, clock=self.clock, device=choice.device,
                               pairing_id=choice.pairing_id or "")
            check.difference_typed.connect(lambda seconds: self._start_live(choice, seconds))
            check.signal_requested.connect(lambda: self.start_session(replace(choice, paired_start=None, signal=True)))
        else:
            self.session = LiveSession.start(self.study, self.store, self.clock, coder=choice.coder,
                                             device=choice.device, present=choice.present,
                                             pairing_id=choice.pairing_id, signal=choice.signal)
            self.session.hold_until_observing()  # a solo first window waits for the observing screen
            check = ClockCheck(self.session)
            check.done.connect(self._begin_observing)
        check.set_theme(self.theme)
        self._show(check)

    def _start_live(self, choice: StartChoice, typed_clock_difference_s: float) -> None:
        """A typed paired start whose clock difference the clock check accepted."""
        self.session = LiveSession.start(self.study, self.store, self.clock, coder=choice.coder, device=choice.device,
                                         paired_start=choice.paired_start, present=choice.present,
                                         pairing_id=choice.pairing_id, typed_clock_difference_s=typed_clock_difference_s)
        self.show_observing()

    def start_replay(self, choice: StartChoice) -> None:
        """Read the roster's logs off the UI thread (a platform's log can take seconds), the start
        form showing it is busy; then open the replay screen, unless the coder went back meanwhile."""
        form = self.page
        if isinstance(form, StartForm):
            form.set_busy("Reading the learners' logs ...")
        job = BackgroundJob(partial(roster_logs, self.study))
        job.finished.connect(partial(self._open_replay, form, choice))
        job.failed.connect(partial(self._replay_logs_failed, form))
        job.start()

    def _replay_logs_failed(self, form: QWidget, error: BaseException) -> None:
        if self.page is not form:
            return
        if isinstance(form, StartForm):
            form.set_busy("")
        self._refused_replay(form, error)

    def _refused_replay(self, form: QWidget, error: BaseException) -> None:
        """The user's mistake as one line on the start form; anything else in the error bar."""
        if isinstance(error, InputError) and isinstance(form, StartForm):
            form.error.setText(error.line())
        else:
            self.show_error(error, error.__traceback__)

    def _open_replay(self, form: QWidget, choice: StartChoice, events) -> None:
        if self.page is not form:  # the coder went back while the logs were read
            return
        if isinstance(form, StartForm):
            form.set_busy("")
        open_session = find_open_replay(self.study, self.store, choice.coder, choice.device)
        try:
            replay = (ReplaySession.reopen(self.study, self.store, self.clock, open_session, events=events)
                      if open_session else
                      ReplaySession.start(self.study, self.store, self.clock, coder=choice.coder, device=choice.device,
                                          learners=choice.present, rule=choice.rule, events=events))
        except InputError as error:
            self._refused_replay(form, error)
            return
        screen = ReplayScreen(replay, self.theme)
        screen.ended.connect(self.show_replay_end)
        self._show(screen)

    def show_replay_end(self, session_id: str) -> None:
        summary = summarise_session(self.store, session_id, self.study.scheme.dimension_names)
        end = EndScreen(self.study, summary, unit="clips")
        end.done.connect(self.show_overview)
        self._show(end)

    def resume_session(self, session_id: str) -> None:
        self.session = LiveSession.reopen(self.study, self.store, self.clock, session_id)
        self.show_observing()

    def _begin_observing(self) -> None:
        self.session.begin_observing()
        self.show_observing()

    def show_observing(self) -> None:
        screen = ObservingScreen(self.session, self.theme)
        screen.ended.connect(self.show_end)
        self._show(screen)

    def show_end(self, summary: SessionSummary) -> None:
        paired = self.session.schedule.paired
        self.session = None
        end = EndScreen(self.study, summary,
                        agreement=partial(partner_agreement, self.study, summary.session_id) if paired else None)
        end.done.connect(self.show_overview)
        end.failed.connect(self.show_error)
        self._show(end)

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        """F6 and Ctrl+Q when the shortcuts did not fire (no window manager marked the window active)."""
        if event.key() == Qt.Key.Key_F6:
            self.toggle_discreet()
        elif event.key() == Qt.Key.Key_Q and event.modifiers() & Qt.KeyboardModifier.ControlModifier:
            self.close()
        else:
            super().keyPressEvent(event)

    def closeEvent(self, event) -> None:  # noqa: N802
        page = self.page
        if isinstance(page, ObservingScreen):
            page.timer.stop()
        if self.store is not None:
            self.store.close()
            self.store = None
        wait_for_background_work()
        super().closeEvent(event)
