"""The replay screen: renders a ReplaySession's state and forwards keys to it.

Layout, top to bottom: the clip's learner (roster label, large) and which clip of how
many; the clip's time range on the log's clock (study time zone); the clip's events
as a table; then the rows every coding screen has (observer_app/ui/coding_screen.py):
one pad per dimension, the last action, the status line, the command keys.  Every
decision is the session's.
"""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QLabel, QTableWidget, QTableWidgetItem

from observer_app.coding.replay import ReplaySession
from observer_app.coding.session_events import EventKind
from observer_app.ui import theme as looks
from observer_app.ui.code_pads import dimension_title
from observer_app.ui.coding_screen import CodingScreen, command_keys
from observer_app.ui.overview import scroll_table
from observer_app.ui.theme import Theme
from observer_app.ui.wording import counted

REPLAY_KEYS = command_keys("clip", "undo the last code or skip (goes back to its clip)", (
    (Qt.Key.Key_PageDown, "PgDn", "skip this clip (stored as a clip with no code)", "skip clip"),
    (Qt.Key.Key_Down, "↑ ↓", "scroll the clip's events", "scroll events"),
))
EVENT_HEADERS = ("Seconds into clip", "Action", "Outcome", "Item")


def short_names(values) -> list[str]:
    """An xAPI verb or activity IRI by its last path part ('.../verbs/attempted' -> 'attempted')."""
    return [text.rstrip("/").rsplit("/", 1)[-1] if text.startswith(("http://", "https://")) else text
            for text in values.astype(str)]


class ReplayScreen(CodingScreen):
    """The screen a coder codes replayed log clips on."""

    session: ReplaySession
    ended = Signal(str)  # the session id, once the end row is written

    def __init__(self, session: ReplaySession, theme: Theme = looks.LIGHT) -> None:
        super().__init__(session, theme, REPLAY_KEYS, unit="clip", help_closing="Esc or F1 closes this list.")
        header, self.caption = self._learner_row(floor=16)
        self.range_label = QLabel()
        self.range_label.setAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        header.addWidget(self.range_label, 2)
        self.root.addLayout(header)

        self.events_table = QTableWidget(0, len(EVENT_HEADERS))
        self.events_table.setHorizontalHeaderLabels(EVENT_HEADERS)
        self.events_table.verticalHeader().hide()
        self.events_table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.events_table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        self.events_table.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
        self.events_table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        self.events_table.setMinimumHeight(150)
        self.root.addWidget(self.events_table, 1)
        self._add_coding_rows(pad_stretch=2)
        self._listen()

    # -- drawing -----------------------------------------------------------------------
    def _style(self, theme: Theme, scale: float) -> None:
        self.caption.setStyleSheet(self._caption_look())
        self.learner_label.set_look(looks.NEXT_POINTS * 1.5 * scale, "font-weight: bold;")
        self.range_label.setStyleSheet(f"font-size: {looks.NEXT_POINTS * scale}pt; color: {theme.text};")
        self.events_table.setStyleSheet(
            f"QTableWidget {{ font-size: {looks.TILE_POINTS * scale}pt; background: {theme.surface};"
            f" color: {theme.text}; gridline-color: {theme.background}; }}"
            f"QTableWidget::item {{ padding-left: 8px; }}"
            f"QHeaderView::section {{ font-size: {looks.STATUS_POINTS * scale}pt; color: {theme.quiet_text};"
            f" background: {theme.background}; padding: 4px; border: none; }}")

    def render(self, kind: EventKind) -> None:
        state = self.session.state()
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
        if kind is EventKind.MOVED:  # the same clip keeps its events: fill the table only for another one
            self._fill_events(events)
        self._render_coding(state.coded, state.message, state.error)
        missing = ", ".join(dimension_title(d) for d in state.missing) or "nothing"
        self.status_label.setText(f"Clips coded: <b>{state.coded_clips}</b> · skipped {state.skipped_clips} · "
                                  f"clip {min(state.position + 1, state.clips)} of {state.clips} · {counted(len(events), 'events')}"
                                  f" · still to code: {missing}")

    def _fill_events(self, events) -> None:
        self.events_table.setRowCount(len(events))
        columns = (events["offset_s"].map("{:.1f} s".format), short_names(events["action"]),
                   short_names(events["outcome"]), short_names(events["item"]))
        for column, values in enumerate(columns):
            for row, value in enumerate(values):
                item = QTableWidgetItem(value)
                if column == 0:
                    item.setTextAlignment(Qt.AlignmentFlag.AlignCenter)
                self.events_table.setItem(row, column, item)

    # -- input -------------------------------------------------------------------------
    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if self._handled_common_key(event):
            return
        if event.key() == Qt.Key.Key_PageDown:
            self.session.skip()
        elif event.key() in (Qt.Key.Key_Up, Qt.Key.Key_Down):
            scroll_table(self.events_table, event.key())
        else:
            self._forward_code_key(event)

    def _end_pressed(self) -> None:
        if self._confirmed_end():
            self.session.end()
            self.ended.emit(self.session.session_id)
