"""The observing screen: renders a LiveSession's state and forwards keys to it.

Layout, top to bottom: whose turn it is (large) and who is next; the time left as a
bar and a number; one pad per dimension with each code's key printed on its tile;
the last action; the status line; the command keys.  Every decision is the
session's; this widget only draws and forwards.

Command keys are keys that can never be a scheme shortcut (a scheme key is one
visible character), so they can never collide with a code.
"""
from __future__ import annotations

import math
import zoneinfo

from PySide6.QtCore import QRectF, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QFont, QFontMetrics, QKeyEvent, QPainter, QPainterPath, QPen
from PySide6.QtWidgets import (QFrame, QHBoxLayout, QLabel, QLineEdit, QListWidget, QListWidgetItem,
                               QSizePolicy, QVBoxLayout, QWidget)

from observer_app.coding.live import CHANGED, LiveSession, SessionState
from observer_app.study.scheme import Code, SchemeDimension
from observer_app.ui import theme as looks
from observer_app.ui.theme import Theme

# (Qt key, how the key is written on screen, what it does, the short form for the hint line or "")
COMMAND_KEYS: tuple[tuple[Qt.Key, str, str, str], ...] = (
    (Qt.Key.Key_F8, "F8", "could not observe: every dimension still to code", "rest not observable"),
    (Qt.Key.Key_Backspace, "Backspace", "undo the last code", "undo"),
    (Qt.Key.Key_Return, "Enter", "write a note for this window", "note"),
    (Qt.Key.Key_Space, "Space", "pause / go on", "pause"),
    (Qt.Key.Key_F3, "F3", "the current learner is absent", "absent"),
    (Qt.Key.Key_F4, "F4", "who is here: mark absent or back", ""),
    (Qt.Key.Key_F5, "F5", "sync mark (this device's clock, now)", "sync mark"),
    (Qt.Key.Key_F6, "F6", "discreet mode on / off", ""),
    (Qt.Key.Key_F7, "F7", "paired: show the countdown to read aloud (3, 2, 1, now)", ""),
    (Qt.Key.Key_F9, "F9", "paired: press on the closing countdown's \"now\" (a second paired mark)", ""),
    (Qt.Key.Key_F10, "F10", "end the session (press twice)", "end"),
    (Qt.Key.Key_F1, "F1", "show / hide all keys", "all keys"),
)
TICK_MILLISECONDS = 100
# Keys that only modify another key: pressing them alone is not a mistake worth a hint.
MODIFIER_KEYS = frozenset({Qt.Key.Key_Shift, Qt.Key.Key_Control, Qt.Key.Key_Alt, Qt.Key.Key_Meta, Qt.Key.Key_AltGr,
                           Qt.Key.Key_CapsLock, Qt.Key.Key_NumLock, Qt.Key.Key_Super_L, Qt.Key.Key_Super_R})


def unknown_key_hint(event: QKeyEvent) -> str:
    """What the screen says when a key means nothing here ("" for a modifier pressed alone)."""
    if event.key() in MODIFIER_KEYS:
        return ""
    text = event.text()
    name = f"'{text}'" if text and text.isprintable() and not text.isspace() else "That key"
    return f"{name} is not a key of this screen  ·  F1 lists the keys"


def local_time(moment, zone: zoneinfo.ZoneInfo, pattern: str = "%H:%M:%S") -> str:
    """A time as every screen writes it: in the study's zone, with the zone's abbreviation."""
    return f"{moment.astimezone(zone).strftime(pattern)} {moment.astimezone(zone):%Z}"


def key_list_html(scheme, command_keys, closing: str) -> str:
    """The F1 key list: every code's key by dimension, then the screen's command keys."""
    codes = []
    for dimension in scheme.dimensions:
        codes.append(f"<tr><td colspan='2'><br><b>{dimension_title(dimension.name).upper()}</b></td></tr>")
        codes += [f"<tr><td><b>{c.key.upper()}</b></td><td>{c.label}</td></tr>" for c in dimension.codes]
    commands = [f"<tr><td><b>{key}</b></td><td>{what}</td></tr>" for _, key, what, _ in command_keys]
    return ("<h2>Keys</h2><table width='100%'><tr>"
            f"<td valign='top' width='45%'><table cellspacing='5'>{''.join(codes)}</table></td>"
            f"<td valign='top'><table cellspacing='5'><tr><td colspan='2'><br><b>COMMANDS</b></td></tr>"
            f"{''.join(commands)}</table></td></tr></table><p>{closing}</p>")


def dimension_title(name: str) -> str:
    """A dimension or code name as the screen writes it: 'rapid_guessing' -> 'Rapid guessing'."""
    return name.replace("_", " ").capitalize()


class FitLabel(QLabel):
    """One line of large text that shrinks to fit its width instead of widening the window.

    A 40-character roster label at arm's-length size is wider than a 1280-pixel screen;
    the text steps down from ``points`` (never below ``floor``) until it fits, and is
    elided only if even the floor is too wide.
    """

    def __init__(self, floor: float = 16.0) -> None:
        super().__init__()
        self._points = 13.0
        self._floor = floor
        self._rest = ""
        self._full = ""
        self.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Fixed)

    def set_look(self, points: float, rest: str = "") -> None:
        """The largest size in points and the rest of the style (colour, weight)."""
        self._points, self._rest = points, rest
        self._fit()

    def setText(self, text: str) -> None:  # noqa: N802 (Qt name)
        self._full = text
        self._fit()

    def full_text(self) -> str:
        return self._full

    def _font(self, points: float) -> QFont:
        font = QFont(self.font())
        font.setPointSizeF(points)
        font.setBold("bold" in self._rest)
        return font

    def _fit(self) -> None:
        points = self._points
        width = max(1, self.width() - 2)
        while points > self._floor and QFontMetrics(self._font(points)).horizontalAdvance(self._full) > width:
            points = max(self._floor, points - 2)
        metrics = QFontMetrics(self._font(points))
        shown = metrics.elidedText(self._full, Qt.TextElideMode.ElideRight, width)
        self.setStyleSheet(f"font-size: {points}pt; {self._rest}")
        self.setFixedHeight(QFontMetrics(self._font(self._points)).height() + 4)
        super().setText(shown)

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        if event.oldSize().width() != event.size().width():
            self._fit()


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


class CodeTile(QWidget):
    """One code: its key in a badge, its label, its scheme colour; filled when in effect."""

    def __init__(self, dimension: SchemeDimension, code: Code, on_click) -> None:
        super().__init__()
        self.dimension = dimension
        self.code = code
        self.selected = False
        self.theme: Theme = looks.LIGHT
        self.scale = 1.0
        self._on_click = on_click
        self.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.setMinimumHeight(36)
        self.setMaximumHeight(66)
        self.setSizePolicy(QSizePolicy.Policy.Expanding, QSizePolicy.Policy.Expanding)
        self.setToolTip(f"key {code.key.upper()}: {code.label}")

    def sizeHint(self) -> QSize:
        return QSize(360, 64)

    def mousePressEvent(self, event) -> None:  # noqa: N802
        self._on_click(self.dimension.name, self.code.name)

    def paintEvent(self, event) -> None:  # noqa: N802
        theme = self.theme
        painter = QPainter(self)
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        box = QRectF(self.rect()).adjusted(2, 3, -2, -3)
        strength = theme.selected_strength if self.selected else theme.colour_strength
        fill = looks.blend(self.code.colour, theme.surface, strength)
        painter.setPen(QPen(looks.blend(self.code.colour, theme.surface, 0.9 if self.selected else 0.3),
                            3 if self.selected else 1))
        painter.setBrush(fill)
        painter.drawRoundedRect(box, 9, 9)
        strip = QPainterPath()
        strip.addRoundedRect(QRectF(box.left(), box.top(), 16, box.height()), 8, 8)
        painter.setPen(Qt.PenStyle.NoPen)
        strip_strength = 0.75 if theme is looks.LIGHT else 0.5
        strip_colour = looks.blend(self.code.colour, theme.surface, strip_strength)
        painter.setBrush(strip_colour.darker(125) if self.selected else strip_colour)
        painter.drawPath(strip)
        painter.drawRect(QRectF(box.left() + 8, box.top(), 8, box.height()))
        side = min(box.height() - 8, 46.0)
        badge = QRectF(box.left() + 26, box.top() + (box.height() - side) / 2, side, side)
        painter.setPen(QPen(QColor(theme.quiet_text), 1.5))
        painter.setBrush(QColor(theme.background))
        painter.drawRoundedRect(badge, 6, 6)
        key_font = QFont(self.font())
        key_font.setPixelSize(max(12, round(side * looks.KEY_SHARE_OF_BADGE)))
        key_font.setBold(True)
        painter.setFont(key_font)
        painter.setPen(QColor(theme.text))
        painter.drawText(badge, Qt.AlignmentFlag.AlignCenter, self.code.key.upper())
        label_font = QFont(self.font())
        label_font.setPointSizeF(looks.TILE_POINTS * self.scale)
        label_font.setBold(self.selected)
        painter.setFont(label_font)
        painter.setPen(QColor(looks.readable_text(fill, theme)))
        text_box = QRectF(badge.right() + 16, box.top(), box.right() - badge.right() - 26, box.height())
        smallest = label_font.pointSizeF() * 0.7  # shrink a long label before eliding it
        while (painter.fontMetrics().horizontalAdvance(self.code.label) > text_box.width()
               and label_font.pointSizeF() > smallest):
            label_font.setPointSizeF(label_font.pointSizeF() - 1)
            painter.setFont(label_font)
        label = painter.fontMetrics().elidedText(self.code.label, Qt.TextElideMode.ElideRight, int(text_box.width()))
        painter.drawText(text_box, Qt.AlignmentFlag.AlignVCenter | Qt.AlignmentFlag.AlignLeft, label)


class DimensionPad(QFrame):
    """One dimension: its name, whether it is still to code, and a tile per code."""

    def __init__(self, dimension: SchemeDimension, on_click, slots: int = 0) -> None:
        """``slots``: the most codes any pad has; empty slots keep every pad's tiles the same height."""
        super().__init__()
        self.dimension = dimension
        self.setProperty("role", "panel")
        layout = QVBoxLayout(self)
        layout.setContentsMargins(14, 10, 14, 12)
        layout.setSpacing(4)
        header = QHBoxLayout()
        self.title = QLabel(dimension_title(dimension.name).upper())
        self.state = QLabel("")
        self.state.setAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        self.title.setSizePolicy(QSizePolicy.Policy.Minimum, QSizePolicy.Policy.Preferred)
        header.addWidget(self.title)
        header.addWidget(self.state, 1)
        layout.addLayout(header)
        self.tiles = [CodeTile(dimension, code, on_click) for code in dimension.codes]
        for tile in self.tiles:
            layout.addWidget(tile, 1)
        for _ in range(max(0, slots - len(self.tiles))):
            layout.addStretch(1)

    def show_code(self, code: str | None, theme: Theme, scale: float) -> None:
        for tile in self.tiles:
            tile.selected = tile.code.name == code
            tile.theme, tile.scale = theme, scale
            tile.update()
        points = looks.PAD_TITLE_POINTS * scale
        self.title.setStyleSheet(f"font-size: {points}pt; font-weight: bold; color: {theme.quiet_text};")
        if code is None:
            self.state.setText("to code")
            self.state.setStyleSheet(f"font-size: {points}pt; color: {theme.quiet_text};")
        else:
            self.state.setText("✓ " + self.dimension.code(code).label)
            self.state.setStyleSheet(f"font-size: {points}pt; font-weight: bold; color: {theme.text};")


def pads_for(scheme, on_click) -> list[DimensionPad]:
    """One pad per dimension, tiles of equal height across pads."""
    slots = max(len(dimension.codes) for dimension in scheme.dimensions)
    return [DimensionPad(dimension, on_click, slots) for dimension in scheme.dimensions]


class NoteEdit(QLineEdit):
    """The note line: Enter saves, Escape gives up; neither reaches the screen behind it."""

    def __init__(self, on_save, on_cancel) -> None:
        super().__init__()
        self._on_save, self._on_cancel = on_save, on_cancel
        self.setPlaceholderText("Note for this window - Enter saves, Esc cancels")

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() == Qt.Key.Key_Escape:
            self._on_cancel()
        elif event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self._on_save()
        else:
            super().keyPressEvent(event)


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


class CodingKeysMixin:
    """What both coding screens (live and replay) do the same way with pads, notes and F10.

    The screen provides ``session``, ``help``, ``note_edit``, ``message_label``, ``_confirm_end``
    and ``_end_pressed``.
    """

    def _handled_common_key(self, event: QKeyEvent) -> bool:
        """Keys both screens share (auto-repeat, F1, Backspace, Enter, F8, F10); True when handled."""
        key = event.key()
        if event.isAutoRepeat():
            return True
        if self.help.isVisible() and key in (Qt.Key.Key_Escape, Qt.Key.Key_F1):
            self.help.hide()
            return True
        if key != Qt.Key.Key_F10:
            self._confirm_end = False
        if key == Qt.Key.Key_F1:
            self.help.raise_()
            self.help.show()
        elif key == Qt.Key.Key_Backspace:
            self.session.undo()
        elif key in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.note_edit.clear()
            self.note_edit.show()
            self.note_edit.setFocus()
        elif key == Qt.Key.Key_F8:
            self.session.code_remaining_not_observed()
        elif key == Qt.Key.Key_F10:
            self._end_pressed()
        else:
            return False
        return True

    def _show_unknown_key(self, event: QKeyEvent) -> None:
        if event.key() == Qt.Key.Key_F6 or event.modifiers() & Qt.KeyboardModifier.ControlModifier:
            event.ignore()  # the window's keys (F6 discreet, Ctrl+Q quit): let the window have them
            return
        hint = unknown_key_hint(event)
        if hint:
            self.message_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * self._scale}pt;"
                                             f" color: {self.theme.warning}; font-weight: bold;")
            self.message_label.setText(hint)

    def _clicked(self, dimension: str, code: str) -> None:
        self.session.code(dimension, code)
        self.setFocus()

    def _save_note(self) -> None:
        self.session.note(self.note_edit.text())
        self._close_note()

    def _close_note(self) -> None:
        self.note_edit.hide()
        self.setFocus()

    def _confirmed_end(self) -> bool:
        """F10 pressed: True on the second press in a row, else ask for it."""
        if self._confirm_end:
            return True
        self._confirm_end = True
        self.message_label.setText("Press F10 again to end the session; any other key keeps it going.")
        return False


class ObservingScreen(CodingKeysMixin, QWidget):
    """The screen a coder watches during a live session."""

    ended = Signal(object)  # the SessionSummary, once the end row is written

    def __init__(self, session: LiveSession, theme: Theme = looks.LIGHT) -> None:
        super().__init__()
        self.session = session
        self.theme = theme
        self._zone = zoneinfo.ZoneInfo(session.study.timezone)
        self._confirm_end = False
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        root = QVBoxLayout(self)
        root.setContentsMargins(28, 18, 28, 14)
        root.setSpacing(10)

        header = QHBoxLayout()
        turn = QVBoxLayout()
        self.turn_caption = QLabel()
        self.learner_label = FitLabel(floor=20)
        turn.addWidget(self.turn_caption)
        turn.addWidget(self.learner_label)
        header.addLayout(turn, 3)
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

        pads = QHBoxLayout()
        pads.setSpacing(18)
        self.pads = pads_for(session.study.scheme, self._clicked)
        for pad in self.pads:
            pads.addWidget(pad, 1)
        root.addLayout(pads, 1)

        self.note_edit = NoteEdit(self._save_note, self._close_note)
        self.note_edit.hide()
        root.addWidget(self.note_edit)
        self.message_label = QLabel()
        self.status_label = QLabel()
        self.keys_label = QLabel()
        for label in (self.message_label, self.status_label, self.keys_label):
            label.setWordWrap(True)
            root.addWidget(label)

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
        self.help = QLabel(self)
        self.help.setTextFormat(Qt.TextFormat.RichText)
        self.help.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.help.setMargin(28)
        self.help.setWordWrap(True)
        self.help.hide()

        session.add_listener(self._changed)
        self.timer = QTimer(self)
        self.timer.setInterval(TICK_MILLISECONDS)
        self.timer.timeout.connect(session.tick)
        self.timer.start()
        self.set_theme(theme)

    # -- drawing -----------------------------------------------------------------------
    def set_theme(self, theme: Theme) -> None:
        self.theme = theme
        scale = looks.DISCREET_SCALE if theme is looks.DISCREET else 1.0
        self._scale = scale
        caption = f"font-size: {13 * scale}pt; color: {theme.quiet_text}; letter-spacing: 2px;"
        self.turn_caption.setStyleSheet(caption)
        self.next_caption.setStyleSheet(caption)
        self.learner_label.set_look(looks.LEARNER_POINTS * scale, "font-weight: bold;")
        self.next_label.set_look(looks.NEXT_POINTS * scale, f"color: {theme.text};")
        self.slot_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * scale}pt; color: {theme.quiet_text};")
        self.time_label.setStyleSheet(f"font-size: {looks.TIME_POINTS * scale}pt; font-weight: bold;")
        self.status_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * scale}pt;")
        self.keys_label.setStyleSheet(f"font-size: {(looks.STATUS_POINTS - 1) * scale}pt; color: {theme.quiet_text};")
        self.note_edit.setStyleSheet(f"font-size: {looks.TILE_POINTS * scale}pt;")
        self.help.setStyleSheet(f"background: {theme.surface}; color: {theme.text}; font-size: {14 * scale}pt;"
                                f"border: 2px solid {theme.accent}; border-radius: 10px;")
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
        self.keys_label.setText(" &nbsp;·&nbsp; ".join(f"<b>{key}</b> {short}" for _, key, _, short in COMMAND_KEYS if short))
        self._render_help()
        self.render(CHANGED)

    def _changed(self, kind: str) -> None:
        self.render(kind)

    def render(self, kind: str = CHANGED) -> None:
        state = self.session.state()
        self._render_time(state)
        if kind != CHANGED:
            return
        theme = self.theme
        if state.ended:
            self.turn_caption.setText("SESSION ENDED")
        elif state.paused:
            self.turn_caption.setText("PAUSED  -  press Space to go on")
        elif state.awaiting_signal:
            self.turn_caption.setText(f"PAIRING CODE {state.pairing_id}  -  ONE OF YOU COUNTS \"3, 2, 1, NOW\" "
                                      "(F7 SHOWS IT)  -  BOTH PRESS ENTER ON \"NOW\"  -  FIRST UP")
        elif state.waiting:
            self.turn_caption.setText("WAITING FOR THE SHARED START  -  FIRST UP")
        else:
            self.turn_caption.setText("NOW OBSERVING" + (f"  -  CHECK CODE {state.check_code}" if state.check_code else ""))
        self.learner_label.setText((state.label or "nobody present")
                                   + ("  (absent: slot skipped)" if state.skipped else ""))
        self.next_label.setText(state.next_label or "-")
        mode = "paired" if state.paired else "solo"
        self.slot_label.setText(f"slot {state.slot + 1} · round {state.round + 1} · {mode}")
        for pad in self.pads:
            pad.show_code(state.coded.get(pad.dimension.name), theme, self._scale)
        self._render_pause(state)
        self.message_label.setText(state.message)
        colour = theme.warning if state.error else theme.text
        self.message_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * self._scale}pt; color: {colour};")
        if state.error:
            self.message_label.setText(state.error)
        last = "-" if state.last_saved_at is None else local_time(state.last_saved_at, self._zone)
        missing = ", ".join(dimension_title(d) for d in state.missing) or "nothing"
        absent = f" · absent: {', '.join(self.session.label(a) for a in state.absent)}" if state.absent else ""
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

    def _render_help(self) -> None:
        self.help.setText(key_list_html(self.session.study.scheme, COMMAND_KEYS,
                                        "Esc or F1 closes this list. The app makes no sound."))

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self.help.setGeometry(self.rect().adjusted(60, 40, -60, -40))
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
        elif not (event.text() and self.session.press(event.text())):
            self._show_unknown_key(event)

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
