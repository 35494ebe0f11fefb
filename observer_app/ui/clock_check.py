"""Clock check: this device's UTC time, large and to the second, so two coders can compare.

M (or F5) stores a sync mark; Enter goes on to observing.  The marks let sync/ put
this device's stamps on the log's clock later.
"""
from __future__ import annotations

import zoneinfo

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from observer_app.coding.live import LiveSession
from observer_app.ui import theme as looks


class ClockCheck(QWidget):
    done = Signal()

    def __init__(self, session: LiveSession) -> None:
        super().__init__()
        self.session = session
        self._zone = zoneinfo.ZoneInfo(session.study.timezone)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(48, 40, 48, 32)
        caption = QLabel(f"THIS DEVICE ({session.device}), UTC")
        caption.setProperty("role", "caption")
        self.utc = QLabel()
        self.utc.setStyleSheet("font-size: 96pt; font-weight: bold;")
        self.local = QLabel()
        self.local.setProperty("role", "caption")
        self.marks = QLabel("No sync mark yet.")
        hint = QLabel("Compare this clock with the other device or the log server.   "
                      "M or F5 store a sync mark now  ·  Enter start observing")
        hint.setWordWrap(True)
        hint.setProperty("role", "caption")
        layout.addStretch(1)
        for widget in (caption, self.utc, self.local, self.marks):
            layout.addWidget(widget, 0, Qt.AlignmentFlag.AlignHCenter)
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
        now = self.session.clock.now_utc()
        self.utc.setText(f"{now:%H:%M:%S}")
        self.local.setText(f"{now:%Y-%m-%d}  ·  {now.astimezone(self._zone):%H:%M:%S} in {self.session.study.timezone}")

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() in (Qt.Key.Key_M, Qt.Key.Key_F5):
            marked = self.session.sync_mark(note="clock check")
            if marked is not None:
                self._times.append(f"{marked:%H:%M:%S}.{marked.microsecond // 1000:03d}")
                self.marks.setText("Sync marks stored at " + ", ".join(self._times) + " UTC")
        elif event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.timer.stop()
            self.done.emit()
        else:
            super().keyPressEvent(event)
