"""The replay screen: renders a ReplaySession's state and forwards keys to it.

Layout, top to bottom: the clip's learner (roster label, large) and which clip of how
many; the clip's time range on the log's clock (study time zone); the clip's events
as a table; one pad per dimension (the observing screen's own widgets); the last
action; the status line; the command keys.  Every decision is the session's.
"""
from __future__ import annotations

import zoneinfo

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from observer_app.coding.replay import ReplaySession
from observer_app.ui import theme as looks
from observer_app.ui.observing import CodingKeysMixin, FitLabel, NoteEdit, dimension_title, key_list_html, pads_for
from observer_app.ui.overview import scroll_table
from observer_app.ui.theme import Theme

# (Qt key, how the key is written on screen, what it does, the short form for the hint line)
REPLAY_KEYS: tuple[tuple[Qt.Key, str, str, str], ...] = (
    (Qt.Key.Key_F8, "F8", "could not observe: every dimension still to code", "rest not observable"),
    (Qt.Key.Key_PageDown, "PgDn", "skip this clip (stored as a clip with no code)", "skip clip"),
    (Qt.Key.Key_Down, "↑ ↓", "scroll the clip's events", "scroll events"),
    (Qt.Key.Key_Backspace, "Backspace", "undo the last code or skip (goes back to its clip)", "undo"),
    (Qt.Key.Key_Return, "Enter", "write a note for this clip", "note"),
    (Qt.Key.Key_F10, "F10", "end the session (press twice)", "end"),
    (Qt.Key.Key_F1, "F1", "show / hide all keys", "all keys"),
)
EVENT_HEADERS = ("Seconds into clip", "Action", "Outcome", "Item")


def short_names(values) -> list[str]:
    """An xAPI verb or activity IRI by its last path part ('.../verbs/attempted' -> 'attempted')."""
    return [text.rstrip("/").rsplit("/", 1)[-1] if text.startswith(("http://", "https://")) else text
            for text in values.astype(str)]


class ReplayScreen(CodingKeysMixin, QWidget):
    """The screen a coder codes replayed log clips on."""

    ended = Signal(str)  # the session id, once the end row is written

    def __init__(self, session: ReplaySession, theme: Theme = looks.LIGHT) -> None:
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
        who = QVBoxLayout()
        self.caption = QLabel()
        self.learner_label = FitLabel(floor=16)
        who.addWidget(self.caption)
        who.addWidget(self.learner_label)
        header.addLayout(who, 3)
        self.range_label = QLabel()
        self.range_label.setAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        header.addWidget(self.range_label, 2)
        root.addLayout(header)

        self.events_table = QTableWidget(0, len(EVENT_HEADERS))
        self.events_table.setHorizontalHeaderLabels(EVENT_HEADERS)
        self.events_table.verticalHeader().hide()
        self.events_table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.events_table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.events_table.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
        self.events_table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.events_table.setMinimumHeight(150)
        root.addWidget(self.events_table, 1)

        pads = QHBoxLayout()
        pads.setSpacing(18)
        self.pads = pads_for(session.study.scheme, self._clicked)
        for pad in self.pads:
            pads.addWidget(pad, 1)
        root.addLayout(pads, 2)

        self.note_edit = NoteEdit(self._save_note, self._close_note)
        self.note_edit.setPlaceholderText("Note for this clip - Enter saves, Esc cancels")
        self.note_edit.hide()
        root.addWidget(self.note_edit)
        self.message_label = QLabel()
        self.status_label = QLabel()
        self.keys_label = QLabel()
        for label in (self.message_label, self.status_label, self.keys_label):
            label.setWordWrap(True)
            root.addWidget(label)
        self.help = QLabel(self)
        self.help.setTextFormat(Qt.TextFormat.RichText)
        self.help.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        self.help.setMargin(28)
        self.help.setWordWrap(True)
        self.help.hide()
        session.add_listener(self._changed)
        self.set_theme(theme)

    # -- drawing -----------------------------------------------------------------------
    def set_theme(self, theme: Theme) -> None:
        self.theme = theme
        scale = looks.DISCREET_SCALE if theme is looks.DISCREET else 1.0
        self._scale = scale
        self.caption.setStyleSheet(f"font-size: {13 * scale}pt; color: {theme.quiet_text}; letter-spacing: 2px;")
        self.learner_label.set_look(looks.NEXT_POINTS * 1.5 * scale, "font-weight: bold;")
        self.range_label.setStyleSheet(f"font-size: {looks.NEXT_POINTS * scale}pt; color: {theme.text};")
        self.events_table.setStyleSheet(
            f"QTableWidget {{ font-size: {looks.TILE_POINTS * scale}pt; background: {theme.surface};"
            f" color: {theme.text}; gridline-color: {theme.background}; }}"
            f"QTableWidget::item {{ padding-left: 8px; }}"
            f"QHeaderView::section {{ font-size: {looks.STATUS_POINTS * scale}pt; color: {theme.quiet_text};"
            f" background: {theme.background}; padding: 4px; border: none; }}")
        self.status_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * scale}pt;")
        self.keys_label.setStyleSheet(f"font-size: {(looks.STATUS_POINTS - 1) * scale}pt; color: {theme.quiet_text};")
        self.note_edit.setStyleSheet(f"font-size: {looks.TILE_POINTS * scale}pt;")
        self.help.setStyleSheet(f"background: {theme.surface}; color: {theme.text}; font-size: {14 * scale}pt;"
                                f"border: 2px solid {theme.accent}; border-radius: 10px;")
        self.keys_label.setText(" &nbsp;·&nbsp; ".join(f"<b>{key}</b> {short}" for _, key, _, short in REPLAY_KEYS))
        self._render_help()
        self.render()

    def _changed(self, kind: str) -> None:
        self.render()

    def render(self) -> None:
        state = self.session.state()
        theme = self.theme
        if state.ended:
            self.caption.setText("SESSION ENDED")
        elif state.finished:
            self.caption.setText("EVERY CLIP IS DONE  -  F10 twice ends the session")
        else:
            self.caption.setText(f"REPLAYING CLIP {state.position + 1} OF {state.clips}")
        self.learner_label.setText(state.label or "-")
        if state.start is not None:
            start, end = state.start.astimezone(self._zone), state.end.astimezone(self._zone)
            self.range_label.setText(f"{start:%Y-%m-%d}<br><b>{start:%H:%M:%S} – {end:%H:%M:%S} {end:%Z}</b>"
                                     f"<br><span style='font-size:{looks.STATUS_POINTS}pt'>log clock, "
                                     f"{self.session.study.timezone}</span>")
        else:
            self.range_label.setText("")
        events = state.events
        self.events_table.setRowCount(len(events))
        columns = (events["offset_s"].map("{:.1f} s".format), short_names(events["action"]),
                   short_names(events["outcome"]), short_names(events["item"]))
        for column, values in enumerate(columns):
            for row, value in enumerate(values):
                item = QTableWidgetItem(value)
                if column == 0:
                    item.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.events_table.setItem(row, column, item)
        for pad in self.pads:
            pad.show_code(state.coded.get(pad.dimension.name), theme, self._scale)
        colour = theme.warning if state.error else theme.text
        self.message_label.setStyleSheet(f"font-size: {looks.STATUS_POINTS * self._scale}pt; color: {colour};")
        self.message_label.setText(state.error or state.message)
        missing = ", ".join(dimension_title(d) for d in state.missing) or "nothing"
        self.status_label.setText(f"Clips coded: <b>{state.coded_clips}</b> · skipped {state.skipped_clips} · "
                                  f"clip {min(state.position + 1, state.clips)} of {state.clips} · {len(events)} events"
                                  f" · still to code: {missing}")

    def _render_help(self) -> None:
        self.help.setText(key_list_html(self.session.study.scheme, REPLAY_KEYS, "Esc or F1 closes this list."))

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self.help.setGeometry(self.rect().adjusted(60, 40, -60, -40))

    # -- input -------------------------------------------------------------------------
    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if self._handled_common_key(event):
            return
        if event.key() == Qt.Key.Key_PageDown:
            self.session.skip()
        elif event.key() in (Qt.Key.Key_Up, Qt.Key.Key_Down):
            scroll_table(self.events_table, event.key())
        elif not (event.text() and self.session.press(event.text())):
            self._show_unknown_key(event)

    def _end_pressed(self) -> None:
        if self._confirmed_end():
            self.session.end()
            self.ended.emit(self.session.session_id)
