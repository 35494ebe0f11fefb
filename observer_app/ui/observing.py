"""The observing screen: renders a LiveSession's state and forwards keys to it.

Layout, top to bottom: whose turn it is (large) and who is next; the time left as a
bar and a number; then the rows every coding screen has (observer_app/ui/
coding_screen.py): one pad per dimension with each code's key printed on its tile,
the last action, the status line, the command keys.  Every decision is the
session's; this widget only draws and forwards.
"""
from __future__ import annotations

import math
import zoneinfo

from PySide6.QtCore import QRectF, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QKeyEvent, QPainter
from PySide6.QtWidgets import (QFrame, QHBoxLayout, QLabel, QListWidget, QListWidgetItem, QSizePolicy, QVBoxLayout,
                               QWidget)

from observer_app.coding.live import LiveSession, SessionState
from observer_app.coding.session_events import EventKind
from observer_app.ui import theme as looks
from observer_app.ui.code_pads import dimension_title
from observer_app.ui.coding_screen import CodingScreen, FitLabel, command_keys
from observer_app.ui.theme import Theme

COMMAND_KEYS = command_keys("window", "undo the last code", (
    (Qt.Key.Key_Space, "Space", "pause / go on", "pause"),
    (Qt.Key.Key_F3, "F3", "the current learner is absent", "absent"),
    (Qt.Key.Key_F4, "F4", "who is here: mark absent or back", ""),
    (Qt.Key.Key_F5, "F5", "sync mark (this device's clock, now)", "sync mark"),
    (Qt.Key.Key_F6, "F6", "discreet mode on / off", ""),
    (Qt.Key.Key_F7, "F7", "paired: show the countdown to read aloud (3, 2, 1, now)", ""),
    (Qt.Key.Key_F9, "F9", "paired: press on the closing countdown's \"now\" (a second paired mark)", ""),
))
TICK_MILLISECONDS = 100


def local_time(moment, zone: zoneinfo.ZoneInfo, pattern: str = "%H:%M:%S") -> str:
    """A time as every screen writes it: in the study's zone, with the zone's abbreviation."""
    return f"{moment.astimezone(zone).strftime(pattern)} {moment.astimezone(zone):%Z}"

ABSENT_SHOWN = 3  # the status line names this many absent learners, then counts the rest


class TimeBar(QWidget):
    """The part of the window still left, as a bar that empties from the right."""

    def __init__(self) -> None:
        super().__init__()
        self.fraction = 1.0
        self.theme: Theme = looks.LIGHT
        self.setMinimumHeight(22)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Fixed)

    def sizeHint(self) -> QSize:
        return QSize(600, 22)

    def paintEvent(self, event) -> None:  # noqa: N802 (Qt name)
        painter = QPainter(self)
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        outer = QRectF(self.rect()).adjusted(1, 1, -1, -1)
        painter.setPen(Qt.PenStyle.NoPen)
        painter.setBrush(QColor(self.theme.surface))
        painter.drawRoundedRect(outer, 8, 8)
        if self.fraction > 0:
            filled = QRectF(outer.left(), outer.top(), outer.width() * min(1.0, self.fraction), outer.height())
            painter.setBrush(QColor(self.theme.accent))
            painter.drawRoundedRect(filled, 8, 8)


class PresenceList(QListWidget):
    """Who is here: Up/Down to choose, Enter to switch absent / back, Escape to close."""

    def __init__(self, on_toggle, on_close) -> None:
        super().__init__()
        self._on_toggle, self._on_close = on_toggle, on_close

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() in (Qt.Key.Key_Escape, Qt.Key.Key_F4):
            self._on_close()
        elif event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            item = self.currentItem()
            if item is not None:
                self._on_toggle(item.data(Qt.ItemDataRole.UserRole))
        else:
            super().keyPressEvent(event)


class ObservingScreen(CodingScreen):
    """The screen a coder watches during a live session."""

    session: LiveSession
    ended = Signal(object)  # the SessionSummary, once the end row is written

    def __init__(self, session: LiveSession, theme: Theme = looks.LIGHT) -> None:
        super().__init__(session, theme, COMMAND_KEYS, unit="window",
                         help_closing="Esc or F1 closes this list. The app makes no sound.")
        root = self.root
        header, self.turn_caption = self._learner_row(floor=20)
        upcoming = QVBoxLayout()
        self.next_caption = QLabel("NEXT")
        self.next_label = FitLabel(floor=13)
        self.slot_label = QLabel()
        for label in (self.next_caption, self.next_label, self.slot_label):
            label.setAlignment(Qt.AlignmentFlag.AlignRight)
            upcoming.addWidget(label)
        upcoming.addStretch(1)
        header.addLayout(upcoming, 1)
        root.addLayout(header)

        timing = QHBoxLayout()
        self.time_bar = TimeBar()
        self.time_label = QLabel()
        self.time_label.setMinimumWidth(150)
        self.time_label.setAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        timing.addWidget(self.time_bar, 1)
        timing.addWidget(self.time_label)
        root.addLayout(timing)
        self._add_coding_rows(pad_stretch=1)

        self.presence_panel = QFrame(self)
        panel_layout = QVBoxLayout(self.presence_panel)
        panel_layout.setContentsMargins(20, 16, 20, 16)
        self.presence_caption = QLabel("WHO IS HERE  -  Up/Down choose · Enter switch absent / back · Esc close")
        self.presence_caption.setWordWrap(True)
        self.presence = PresenceList(self._toggle_presence, self._close_presence)
        panel_layout.addWidget(self.presence_caption)
        panel_layout.addWidget(self.presence, 1)
        self.presence_panel.hide()
        self.pause_cover = QLabel(self)  # paused: the whole screen changes, so nobody codes into a pause
        self.pause_cover.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.pause_cover.setWordWrap(True)
        self.pause_cover.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.pause_cover.hide()

        self.timer = QTimer(self)
        self.timer.setInterval(TICK_MILLISECONDS)
        self.timer.timeout.connect(session.tick)
        self.timer.start()
        self._listen()

    # -- drawing -----------------------------------------------------------------------
    def _style(self, theme: Theme, scale: float) -> None:
        self.turn_caption.setStyleSheet(self._caption_look())
        self.next_caption.setStyleSheet(self._caption_look())
        self.learner_label.set_look(looks.LEARNER_POINTS * scale, "font-weight: bold;")
        self.next_label.set_look(looks.NEXT_POINTS * scale, f"color: {theme.text};")
        self.slot_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * scale}pt; color: {theme.quiet_text};")
        self.time_label.setStyleSheet(f"font-size: {looks.TIME_POINTS * scale}pt; font-weight: bold;")
        self.presence_panel.setStyleSheet(
            f"QFrame {{ background: {theme.surface}; border: 2px solid {theme.accent}; border-radius: 10px; }}"
            f"QLabel {{ border: none; color: {theme.quiet_text}; font-size: {13 * scale}pt; }}"
            f"QListWidget {{ border: none; font-size: {looks.TILE_POINTS * scale}pt; }}"
            f"QListWidget::item {{ padding: 6px; }}"
            f"QListWidget::item:selected {{ background: {looks.blend(theme.accent, theme.surface, 0.35).name()};"
            f" color: {theme.text}; }}")
        self.pause_cover.setStyleSheet(f"background: {looks.blend(theme.accent, theme.background, 0.55).name()};"
                                       f" color: {theme.text};")
        self.time_bar.theme = theme

    def render(self, kind: EventKind) -> None:
        state = self.session.state()
        self._render_time(state)
        if kind is EventKind.TICK:
            return
        theme = self.theme
        if state.ended:
            self.turn_caption.setText("SESSION ENDED")
        elif state.paused:
            self.turn_caption.setText("PAUSED  -  press Space to go on")
        elif state.awaiting_signal:
            self.turn_caption.setText(f"PAIRING CODE {state.pairing_id}  -  COUNT \"3, 2, 1, NOW\" (F7)  -  "
                                      "BOTH PRESS ENTER ON \"NOW\"  -  FIRST UP")
        elif state.waiting:
            self.turn_caption.setText("WAITING FOR THE SHARED START  -  FIRST UP")
        else:
            self.turn_caption.setText("NOW OBSERVING" + (f"  -  CHECK CODE {state.check_code}" if state.check_code else ""))
        self.learner_label.setText((state.label or "nobody present")
                                   + ("  (absent: slot skipped)" if state.skipped else ""))
        self.next_label.setText(state.next_label or "-")
        mode = "paired" if state.paired else "solo"
        self.slot_label.setText(f"slot {state.slot + 1} · round {state.round + 1} · {mode}")
        self._render_coding(state.coded, state.message, state.error)
        self._render_pause(state)
        last = "-" if state.last_saved_at is None else local_time(state.last_saved_at, self._zone)
        missing = ", ".join(dimension_title(d) for d in state.missing) or "nothing"
        shown = [self.session.label(learner) for learner in state.absent[:ABSENT_SHOWN]]
        more = len(state.absent) - len(shown)
        absent = (f" · absent: {', '.join(shown)}" + (f" and {more} more (F3 lists them)" if more else "")
                  if state.absent else "")
        missed = (f"<span style='color:{theme.warning}'><b>{state.missed_windows}</b> ran out uncoded</span>"
                  if state.missed_windows else "0 ran out uncoded")
        self.status_label.setText(f"Windows coded: <b>{state.coded_windows}</b> · {missed} · last save {last} · "
                                  f"still to code: {missing}{absent}")

    def _render_pause(self, state: SessionState) -> None:
        if not state.paused or state.ended:
            self.pause_cover.hide()
            return
        grid = "<br>The shared grid runs on: windows that pass are saved as missed." if state.paired else ""
        self.pause_cover.setText(
            f"<div style='font-size:{looks.LEARNER_POINTS * self._scale}pt; font-weight:bold;"
            f" letter-spacing:6px'>PAUSED</div>"
            f"<p style='font-size:{looks.NEXT_POINTS * self._scale}pt'>Press <b>Space</b> to go on with "
            f"{state.label or 'the session'}</p>"
            f"<p style='font-size:{looks.STATUS_POINTS * self._scale}pt'>Nothing is coded while paused.{grid}"
            f"<br>F10 twice ends the session · F1 all keys</p>")
        self.pause_cover.setGeometry(self.rect())
        self.pause_cover.raise_()
        self.pause_cover.show()

    def _render_time(self, state: SessionState) -> None:
        if state.awaiting_signal:
            self.time_label.setText(state.countdown or "ready")
            self.time_bar.fraction = 0.0
            self.time_bar.update()
            return
        seconds = max(0, math.ceil(state.time_left - 1e-9))
        if state.countdown:  # the closing countdown, read aloud by one of the coders
            self.time_label.setText(state.countdown)
        elif state.waiting:
            self.time_label.setText(f"{seconds // 60}:{seconds % 60:02d}")
            self.time_bar.fraction = 0.0
        else:
            self.time_label.setText(f"{seconds} s")
            self.time_bar.fraction = state.time_left / state.window_seconds
        self.time_bar.update()

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self.pause_cover.setGeometry(self.rect())
        self._place_presence()

    def _place_presence(self) -> None:
        rows = max(1, self.presence.count())
        height = min(self.height() - 120, 90 + rows * int(looks.TILE_POINTS * self._scale * 2.6))
        self.presence_panel.setGeometry(self.width() // 4, 70, self.width() // 2, height)

    # -- input -------------------------------------------------------------------------
    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        key = event.key()
        if key == Qt.Key.Key_F7 and self.session.schedule.paired:
            self.session.countdown.begin()
            return
        if key == Qt.Key.Key_F9:
            self.session.signal_end()
            return
        if self.session.state().awaiting_signal and key in (Qt.Key.Key_Return, Qt.Key.Key_Enter) \
                and not event.isAutoRepeat():
            self.session.signal_start()
            return
        if self._handled_common_key(event):
            return
        if key == Qt.Key.Key_Space:
            self.session.toggle_pause()
        elif key == Qt.Key.Key_F3:
            self.session.mark_absent()
        elif key == Qt.Key.Key_F4:
            self._open_presence()
        elif key == Qt.Key.Key_F5:
            self.session.sync_mark()
        else:
            self._forward_code_key(event)

    def _end_pressed(self) -> None:
        if self._confirmed_end():
            self.timer.stop()
            self.ended.emit(self.session.end())

    def _open_presence(self) -> None:
        self.presence.clear()
        present = self.session.schedule.present
        for learner in self.session.schedule.learners:
            where = "here" if learner in present else "ABSENT"
            item = QListWidgetItem(f"{self.session.label(learner)}  -  {where}")
            item.setData(Qt.ItemDataRole.UserRole, learner)
            self.presence.addItem(item)
        self.presence.setCurrentRow(0)
        self._place_presence()
        self.presence_panel.raise_()
        self.presence_panel.show()
        self.presence.setFocus()

    def _toggle_presence(self, learner: str) -> None:
        row = self.presence.currentRow()
        if learner in self.session.schedule.present:
            self.session.mark_absent(learner)
        else:
            self.session.mark_returned(learner)
        self._open_presence()
        self.presence.setCurrentRow(row)

    def _close_presence(self) -> None:
        self.presence_panel.hide()
        self.setFocus()
