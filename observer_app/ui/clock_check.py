"""Clock check: this device's UTC time, large and to the second, so two coders can compare.

With a session (solo, or a paired run starting on the countdown): M (or F5) stores a
sync mark; Enter goes on.  The marks let sync/ put this device's stamps on the log's
clock later.  Before a typed paired start there is no session yet: the coders compare
the two screens and type the difference they see (the partner's clock minus this one);
Enter accepts it only within the bound (observer_app/coding/shared_start.py), otherwise
the screen says so and F2 starts on the spoken countdown instead.
"""
from __future__ import annotations

import zoneinfo

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import QLabel, QLineEdit, QVBoxLayout, QWidget

from observer_app.coding.clock import Clock
from observer_app.coding.live import LiveSession
from observer_app.coding.shared_start import TYPED_START_BOUND_S, read_clock_difference
from observer_app.study.folder import Study
from observer_app.ui import theme as looks
from sync.errors import InputError


class ClockCheck(QWidget):
    done = Signal()
    difference_typed = Signal(float)  # typed start: the accepted difference (partner minus this device, s)
    signal_requested = Signal()  # typed start refused or abandoned: start on the countdown instead

    def __init__(self, session: LiveSession | None, *, study: Study | None = None, clock: Clock | None = None,
                 device: str = "", pairing_id: str = "") -> None:
        super().__init__()
        self.session = session
        self.study = session.study if session is not None else study
        self.clock = session.clock if session is not None else clock
        device = session.device if session is not None else device
        pairing_id = (session.pairing_id or "") if session is not None else pairing_id
        self._zone = zoneinfo.ZoneInfo(self.study.timezone)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(48, 40, 48, 32)
        caption = QLabel(f"THIS DEVICE ({device}), UTC" + (f"  ·  PAIRING CODE {pairing_id}" if pairing_id else ""))
        caption.setProperty("role", "caption")
        self.utc = QLabel()
        self.utc.setStyleSheet("font-size: 96pt; font-weight: bold;")
        self.local = QLabel()
        self.local.setProperty("role", "caption")
        self.marks = QLabel("No sync mark yet." if session is not None else "")
        self.difference = QLineEdit()
        self.difference.setPlaceholderText("seconds your partner's clock is ahead of this one, e.g. 0 or -0.5")
        self.difference.setMinimumWidth(460)
        self.difference.returnPressed.connect(self._accept_difference)
        self.error = QLabel("")
        self.error.setProperty("role", "warning")
        self.error.setWordWrap(True)
        if session is None:
            text = (f"Compare this clock with your partner's and type the difference you see (their clock minus "
                    f"this one, in seconds).  A typed start needs the clocks within {TYPED_START_BOUND_S:g} s.   "
                    "Enter accept  ·  F2 start on the spoken countdown instead")
        elif pairing_id:
            text = ("Your clocks need not agree: the run starts on a spoken countdown.   M or F5 store a sync mark "
                    "now  ·  Enter go to the countdown")
        else:
            text = ("Compare this clock with the other device or the log server.   "
                    "M or F5 store a sync mark now  ·  Enter start observing")
        hint = QLabel(text)
        hint.setWordWrap(True)
        hint.setProperty("role", "caption")
        layout.addStretch(1)
        for widget in (caption, self.utc, self.local, self.marks):
            layout.addWidget(widget, 0, Qt.AlignmentFlag.AlignHCenter)
        if session is None:
            self.setFocusProxy(self.difference)  # the keys go to the difference field
            asked = QLabel("YOUR PARTNER'S CLOCK MINUS THIS ONE, IN SECONDS")
            asked.setProperty("role", "caption")
            layout.addWidget(asked, 0, Qt.AlignmentFlag.AlignHCenter)
            layout.addWidget(self.difference, 0, Qt.AlignmentFlag.AlignHCenter)
            self.error.setAlignment(Qt.AlignmentFlag.AlignHCenter)
            layout.addWidget(self.error)  # full width, so a long refusal wraps instead of squeezing
        else:
            self.difference.hide()
            self.error.hide()
        layout.addStretch(1)
        layout.addWidget(hint)
        self.timer = QTimer(self)
        self.timer.setInterval(200)
        self.timer.timeout.connect(self.refresh)
        self.timer.start()
        self._times: list[str] = []
        self.refresh()

    def set_theme(self, theme: looks.Theme) -> None:
        self.utc.setStyleSheet(f"font-size: {96 * (looks.DISCREET_SCALE if theme is looks.DISCREET else 1)}pt;"
                               f"font-weight: bold; color: {theme.text};")

    def refresh(self) -> None:
        now = self.clock.now_utc()
        self.utc.setText(f"{now:%H:%M:%S}")
        local = now.astimezone(self._zone)
        self.local.setText(f"{local:%Y-%m-%d}  ·  {local:%H:%M:%S %Z} in {self.study.timezone}")

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if self.session is None:
            self._typed_start_key(event)
        elif event.key() in (Qt.Key.Key_M, Qt.Key.Key_F5):
            marked = self.session.sync_mark(note="clock check")
            if marked is not None:
                local = marked.astimezone(self._zone)  # the study's zone, like every other time on screen
                self._times.append(f"{local:%H:%M:%S}.{local.microsecond // 1000:03d} {local:%Z}")
                self.marks.setText("Sync marks stored at " + ", ".join(self._times))
        elif event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.timer.stop()
            self.done.emit()
        else:
            super().keyPressEvent(event)

    def _typed_start_key(self, event: QKeyEvent) -> None:
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            if not self.difference.hasFocus():  # the field's own Enter arrives through returnPressed
                self._accept_difference()
        elif event.key() == Qt.Key.Key_F2:
            self.timer.stop()
            self.signal_requested.emit()
        else:
            super().keyPressEvent(event)

    def _accept_difference(self) -> None:
        try:
            seconds = read_clock_difference(self.difference.text())
        except InputError as error:
            self.error.setText(error.line() + " (F2)")
            self.difference.setFocus()
            return
        self.timer.stop()
        self.difference_typed.emit(seconds)
