"""What both coding screens (live and replay) share: the base screen and its widgets.

``CodingScreen`` lays out, below the kind's own rows, one pad per dimension, the note
line, the last action, the status line and the command keys; it keeps the F1 key list
over the screen, forwards pad clicks, the shared keys (Backspace undo, Enter note, F8
could not observe, F10 twice to end) and notes to the session, and redraws when the
session sends a SessionEvent.  Every decision is the session's
(observer_app/coding/coding_session.py); a kind's screen adds only its own rows and keys.

Command keys are keys that can never be a scheme shortcut (a scheme key is one
visible character), so they can never collide with a code.
"""
from __future__ import annotations

import zoneinfo

from PySide6.QtCore import Qt
from PySide6.QtGui import QFont, QFontMetrics, QKeyEvent
from PySide6.QtWidgets import QHBoxLayout, QLabel, QLineEdit, QSizePolicy, QVBoxLayout, QWidget

from observer_app.coding.coding_session import CodingSession
from observer_app.coding.session_events import EventKind, SessionEvent
from observer_app.ui import theme as looks
from observer_app.ui.code_pads import dimension_title, pads_for
from observer_app.ui.theme import Theme

# A screen's command keys: (Qt key, how the key is written on screen, what it does, the short form for
# the hint line or "" to leave it out of the hint line).
CommandKeys = tuple[tuple[Qt.Key, str, str, str], ...]


def command_keys(unit: str, undo: str, own: CommandKeys) -> CommandKeys:
    """A coding screen's command keys: the ones every coding screen handles (``CodingScreen``) around the
    kind's ``own``; ``unit`` names what a note is for, ``undo`` what Backspace does."""
    return ((Qt.Key.Key_F8, "F8", "could not observe: every dimension still to code", "rest not observable"),
            (Qt.Key.Key_Backspace, "Backspace", undo, "undo"),
            (Qt.Key.Key_Return, "Enter", f"write a note for this {unit}", "note"),
            *own,
            (Qt.Key.Key_F10, "F10", "end the session (press twice)", "end"),
            (Qt.Key.Key_F1, "F1", "show / hide all keys", "all keys"))


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


def key_list_html(scheme, keys: CommandKeys, closing: str) -> str:
    """The F1 key list: every code's key by dimension, then the screen's command keys."""
    codes = []
    for dimension in scheme.dimensions:
        codes.append(f"<tr><td colspan='2'><br><b>{dimension_title(dimension.name).upper()}</b></td></tr>")
        codes += [f"<tr><td><b>{c.key.upper()}</b></td><td>{c.label}</td></tr>" for c in dimension.codes]
    commands = [f"<tr><td><b>{key}</b></td><td>{what}</td></tr>" for _, key, what, _ in keys]
    return ("<h2>Keys</h2><table width='100%'><tr>"
            f"<td valign='top' width='45%'><table cellspacing='5'>{''.join(codes)}</table></td>"
            f"<td valign='top'><table cellspacing='5'><tr><td colspan='2'><br><b>COMMANDS</b></td></tr>"
            f"{''.join(commands)}</table></td></tr></table><p>{closing}</p>")


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


class NoteEdit(QLineEdit):
    """The note line: Enter saves, Escape gives up; neither reaches the screen behind it."""

    def __init__(self, on_save, on_cancel) -> None:
        super().__init__()
        self._on_save, self._on_cancel = on_save, on_cancel

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() == Qt.Key.Key_Escape:
            self._on_cancel()
        elif event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self._on_save()
        else:
            super().keyPressEvent(event)


class CodingScreen(QWidget):
    """The base of both coding screens; a kind builds its own rows, then ``_add_coding_rows`` and ``_listen``."""

    def __init__(self, session: CodingSession, theme: Theme, command_keys: CommandKeys, *, unit: str,
                 help_closing: str) -> None:
        """``unit``: what the session codes ("window", "clip"), for the note line's hint."""
        super().__init__()
        self.session = session
        self.theme = theme
        self._scale = 1.0
        self._command_keys = command_keys
        self._help_closing = help_closing
        self._zone = zoneinfo.ZoneInfo(session.study.timezone)  # times are shown in the study's zone
        self._confirm_end = False
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.root = QVBoxLayout(self)
        self.root.setContentsMargins(28, 18, 28, 14)
        self.root.setSpacing(10)
        self.pads = pads_for(session.study.scheme, self._clicked)
        self.note_edit = NoteEdit(self._save_note, self._close_note)
        self.note_edit.setPlaceholderText(f"Note for this {unit} - Enter saves, Esc cancels")
        self.note_edit.hide()
        self.message_label = QLabel()
        self.status_label = QLabel()
        self.keys_label = QLabel()
        self.help = QLabel(self)
        self.help.setTextFormat(Qt.TextFormat.RichText)
        self.help.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.help.setMargin(28)
        self.help.setWordWrap(True)
        self.help.hide()

    def _learner_row(self, floor: float) -> tuple[QHBoxLayout, QLabel]:
        """The top row with its left part, a caption over ``learner_label`` (large, never below ``floor``
        points); the kind adds its right part and names the caption."""
        header = QHBoxLayout()
        who = QVBoxLayout()
        caption = QLabel()
        caption.setWordWrap(True)  # a paired run's long instructions wrap, never widen the window
        self.learner_label = FitLabel(floor=floor)
        who.addWidget(caption)
        who.addWidget(self.learner_label)
        header.addLayout(who, 3)
        return header, caption

    def _add_coding_rows(self, pad_stretch: int) -> None:
        """Below the kind's own rows: the pads, the note line, the message, status and key lines."""
        pads = QHBoxLayout()
        pads.setSpacing(18)
        for pad in self.pads:
            pads.addWidget(pad, 1)
        self.root.addLayout(pads, pad_stretch)
        self.root.addWidget(self.note_edit)
        for label in (self.message_label, self.status_label, self.keys_label):
            label.setWordWrap(True)
            self.root.addWidget(label)

    def _listen(self) -> None:
        """The screen is built: draw it and redraw on every event of the session."""
        self.session.add_listener(self._heard)
        self.set_theme(self.theme)

    def _heard(self, event: SessionEvent) -> None:
        self.render(event.kind)

    # -- drawing -----------------------------------------------------------------------
    def set_theme(self, theme: Theme) -> None:
        self.theme = theme
        scale = looks.DISCREET_SCALE if theme is looks.DISCREET else 1.0
        self._scale = scale
        self.status_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * scale}pt;")
        self.keys_label.setStyleSheet(f"font-size: {(looks.STATUS_POINTS - 1) * scale}pt; color: {theme.quiet_text};")
        self.keys_label.setText(" &nbsp;·&nbsp; ".join(f"<b>{key}</b> {short}"
                                                       for _, key, _, short in self._command_keys if short))
        self.note_edit.setStyleSheet(f"font-size: {looks.TILE_POINTS * scale}pt;")
        self.help.setStyleSheet(f"background: {theme.surface}; color: {theme.text}; font-size: {14 * scale}pt;"
                                f"border: 2px solid {theme.accent}; border-radius: 10px;")
        self.help.setText(key_list_html(self.session.study.scheme, self._command_keys, self._help_closing))
        self._style(theme, scale)
        self.render(EventKind.MOVED)

    def _caption_look(self) -> str:
        """The small spaced capitals over the learner's label."""
        return f"font-size: {13 * self._scale}pt; color: {self.theme.quiet_text}; letter-spacing: 2px;"

    def _style(self, theme: Theme, scale: float) -> None:
        """The kind's own widgets' looks."""
        raise NotImplementedError

    def render(self, kind: EventKind) -> None:
        """Draw the session's state; ``kind`` says how much changed (MOVED: everything)."""
        raise NotImplementedError

    def _render_coding(self, coded: dict[str, str], message: str, error: str | None) -> None:
        """The pads (the codes in effect) and the last action (a failed write in the warning colour)."""
        for pad in self.pads:
            pad.show_code(coded.get(pad.dimension.name), self.theme, self._scale)
        colour = self.theme.warning if error else self.theme.text
        self.message_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * self._scale}pt; color: {colour};")
        self.message_label.setText(error or message)

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self.help.setGeometry(self.rect().adjusted(60, 40, -60, -40))

    # -- input -------------------------------------------------------------------------
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

    def _forward_code_key(self, event: QKeyEvent) -> None:
        """A key no command took: a scheme shortcut goes to the session, anything else gets the hint."""
        if event.text() and self.session.press(event.text()):
            return
        if event.key() == Qt.Key.Key_F6 or event.modifiers() & Qt.KeyboardModifier.ControlModifier:
            event.ignore()  # the window's keys (F6 discreet, Ctrl+Q quit): let the window have them
            return
        hint = unknown_key_hint(event)
        if hint:
            self.message_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * self._scale}pt;"
                                             f" color: {self.theme.warning}; font-weight: bold;")
            self.message_label.setText(hint)

    def _end_pressed(self) -> None:
        """F10: the kind ends its session once ``_confirmed_end``."""
        raise NotImplementedError

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
