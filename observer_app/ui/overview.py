"""Study overview: roster, scheme, sessions so far, observations per learner and per code.

Also where the cautions live, and where an interrupted session is offered for resuming.
Keys: S start a session, R resume, O open another study (handled by the main window);
arrows, Page Up/Down scroll the learners table, Shift+Page Up/Down the sessions table.
"""
from __future__ import annotations

import zoneinfo

import pandas as pd
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import (QAbstractItemView, QAbstractSlider, QFrame, QHBoxLayout, QHeaderView, QLabel,
                               QScrollArea, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

from observer_app.coding.live import InterruptedSession, find_interrupted_session
from observer_app.study.store import Store
from observer_app.study.folder import Study
from observer_app.study.counts import code_counts, session_table, window_counts
from observer_app.ui.cautions import cautions_html
from observer_app.ui.observing import local_time


SCROLL_KEYS = {
    Qt.Key.Key_Down: QAbstractSlider.SliderAction.SliderSingleStepAdd,
    Qt.Key.Key_Up: QAbstractSlider.SliderAction.SliderSingleStepSub,
    Qt.Key.Key_PageDown: QAbstractSlider.SliderAction.SliderPageStepAdd,
    Qt.Key.Key_PageUp: QAbstractSlider.SliderAction.SliderPageStepSub,
    Qt.Key.Key_Home: QAbstractSlider.SliderAction.SliderToMinimum,
    Qt.Key.Key_End: QAbstractSlider.SliderAction.SliderToMaximum,
}
SIDEWAYS_KEYS = {
    Qt.Key.Key_Right: QAbstractSlider.SliderAction.SliderSingleStepAdd,
    Qt.Key.Key_Left: QAbstractSlider.SliderAction.SliderSingleStepSub,
}
TABLE_KEYS_HINT = "<b>↑↓ PgUp PgDn</b> scroll the table  ·  <b>← →</b> sideways"


def scroll_table(table: QTableWidget, key: int) -> bool:
    """Arrows, Page Up/Down, Home/End scroll a table that never takes the focus; True when handled."""
    if key in SCROLL_KEYS:
        table.verticalScrollBar().triggerAction(SCROLL_KEYS[key])
    elif key in SIDEWAYS_KEYS:
        table.horizontalScrollBar().triggerAction(SIDEWAYS_KEYS[key])
    else:
        return False
    return True


def _table(headers: list[str], rows: list[list[str]]) -> QTableWidget:
    table = QTableWidget(len(rows), len(headers))
    table.setHorizontalHeaderLabels(headers)
    table.verticalHeader().hide()
    table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
    table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
    table.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
    table.setShowGrid(False)
    table.setWordWrap(False)
    table.setStyleSheet("QTableWidget, QHeaderView::section { font-size: 11pt; padding: 2px 6px; }")
    table.horizontalHeader().setMinimumSectionSize(30)
    table.verticalHeader().setDefaultSectionSize(26)
    for row_number, row in enumerate(rows):
        for column, value in enumerate(row):
            item = QTableWidgetItem(value)
            if column:
                item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
            table.setItem(row_number, column, item)
    table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
    table.horizontalHeader().setDefaultAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
    return table


def two_lines(text: str) -> str:
    """A header split at the space nearest its middle, so code columns stay narrow."""
    spaces = [index for index, character in enumerate(text) if character == " "]
    if not spaces:
        return text
    cut = min(spaces, key=lambda index: abs(index - len(text) / 2))
    return text[:cut] + "\n" + text[cut + 1:]


def session_mode(row) -> str:
    """How the sessions table names a session's mode: replay, paired or solo."""
    if row.mode == "replay":
        return "replay"
    return "paired" if row.paired else "solo"


def count_table(study: Study, counts: pd.DataFrame, per_learner: pd.DataFrame,
                only_counted: bool = False) -> QTableWidget:
    """Learners down the side (the All row first), then windows, missed and each code across.

    Learners down the side so a roster of 35 scrolls like a list; ``only_counted`` keeps
    the learners with at least one window (the end of a session).
    """
    learners = [learner for learner in study.roster["learner"].astype(str)]
    labels = dict(zip(study.roster["learner"].astype(str), study.roster["label"].astype(str)))
    windows = per_learner.set_index("learner") if len(per_learner) else pd.DataFrame(
        columns=["windows", "missed_windows"])
    if only_counted:
        learners = [learner for learner in learners if int(windows["windows"].get(learner, 0)) > 0]
    lookup = {(str(r.learner), str(r.dimension), str(r.code)): int(r.count) for r in counts.itertuples()}
    codes = [(dimension.name, code) for dimension in study.scheme.dimensions for code in dimension.codes]
    columns = [[int(windows["windows"].get(learner, 0)) for learner in learners],
               [int(windows["missed_windows"].get(learner, 0)) for learner in learners]]
    columns += [[lookup.get((learner, dimension, code.name), 0) for learner in learners] for dimension, code in codes]
    rows = [["All learners"] + [str(sum(column)) for column in columns]]
    rows += [[labels[learner]] + [str(column[number]) for column in columns] for number, learner in enumerate(learners)]
    table = _table(["Learner", "Windows", "Missed\n(no code)"] + [two_lines(code.label) for _, code in codes], rows)
    for number, (dimension, code) in enumerate(codes, start=3):
        table.horizontalHeaderItem(number).setToolTip(f"{dimension}: {code.label} (key {code.key.upper()})")
    bold = table.item(0, 0).font()
    bold.setBold(True)
    for column in range(table.columnCount()):
        table.item(0, column).setFont(bold)
    table.horizontalHeaderItem(0).setTextAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter)
    return table


class StudyOverview(QWidget):
    """Fits a 1280x720 screen without scrolling: the tables scroll themselves, from the keyboard."""

    start_requested = Signal()
    resume_requested = Signal(str)  # session_id
    open_requested = Signal()

    def __init__(self, study: Study, store: Store, device: str) -> None:
        super().__init__()
        self.study = study
        self.store = store
        self.device = device  # only this device's own interrupted sessions are offered
        self.interrupted: InterruptedSession | None = None
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self._layout = QVBoxLayout(self)
        self._layout.setContentsMargins(32, 20, 32, 12)
        self._layout.setSpacing(8)
        self.refresh()

    def refresh(self) -> None:
        """Rebuild every section from the study folder and the store."""
        while self._layout.count():
            item = self._layout.takeAt(0)
            if item.widget():
                item.widget().deleteLater()
            elif item.layout():
                _discard(item.layout())
        study = self.study
        zone = zoneinfo.ZoneInfo(study.timezone)
        title = QLabel(study.name)
        title.setProperty("role", "title")
        self._layout.addWidget(title)
        detail = QLabel(f"{study.dir}  ·  time zone {study.timezone}  ·  windows of {study.window_seconds:g} s, "
                        f"{study.order} order  ·  scheme {study.scheme.name!r} ({study.scheme.content_hash})")
        detail.setProperty("role", "caption")
        detail.setWordWrap(True)
        self._layout.addWidget(detail)

        self.interrupted = find_interrupted_session(study, self.store, self.device)
        self.resume_banner = QLabel()
        if self.interrupted is not None:
            kind = "paired run" if self.interrupted.paired_start is not None else "solo"
            self.resume_banner.setText(
                f"<b>A session was interrupted</b> ({kind}, coder {self.interrupted.coder}, "
                f"device {self.interrupted.device}, "
                f"started {local_time(self.interrupted.started_at, zone, '%Y-%m-%d %H:%M')}, "
                f"codes saved: {self.interrupted.codes_saved}). Press <b>R</b> to resume it at the right slot.")
            self.resume_banner.setProperty("role", "warning")
            self.resume_banner.setWordWrap(True)
            self.resume_banner.setStyleSheet("font-size: 15pt; padding: 4px;")
            self._layout.addWidget(self.resume_banner)

        columns = QHBoxLayout()
        columns.setSpacing(24)
        left = QVBoxLayout()
        scheme_lines = []
        for dimension in study.scheme.dimensions:
            codes = "  ".join(f"<span style='color:{c.colour}'>■</span>&nbsp;<b>{c.key.upper()}</b>&nbsp;{c.label}"
                              for c in dimension.codes)
            scheme_lines.append(f"<p><b>{dimension.name}</b> ({dimension.level}): {codes}</p>")
        scheme = QLabel("".join(scheme_lines))
        scheme.setWordWrap(True)
        scheme.setStyleSheet("font-size: 12pt;")
        scheme.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        left.addWidget(self._section("Code scheme", scheme))
        cautions = QLabel("<b>Before you observe</b>" + cautions_html())
        cautions.setWordWrap(True)
        cautions.setStyleSheet("font-size: 10pt;")
        # the sessions table beside it may ask for any width (its rows come from every device);
        # the cautions keep room to be read whole, and the tables scroll instead
        cautions.setMinimumWidth(cautions.fontMetrics().averageCharWidth() * 56)
        panel = QFrame()
        panel.setProperty("role", "panel")
        QVBoxLayout(panel).addWidget(cautions)
        left.addWidget(panel)
        left.addStretch(1)
        # On a short screen (150 % scaling, a resume banner above) the scheme and cautions
        # scroll as one column rather than squeeze the text out of their boxes.
        holder = QWidget()
        holder.setLayout(left)
        left.setContentsMargins(0, 0, 0, 0)
        column = QScrollArea()
        column.setWidget(holder)
        column.setWidgetResizable(True)
        column.setFrameShape(QFrame.Shape.NoFrame)
        column.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        column.setFocusPolicy(Qt.FocusPolicy.NoFocus)  # the keys stay with the overview's tables
        column.setMinimumWidth(cautions.minimumWidth() + 24)
        columns.addWidget(column, 2)

        right = QVBoxLayout()
        sessions = session_table(self.store).iloc[::-1]  # newest first: the one you look for is on top
        session_rows = [[row.coder, row.device, session_mode(row),
                         local_time(row.started_at, zone, "%Y-%m-%d %H:%M"),
                         ("imported" if row.imported else "interrupted") if pd.isna(row.ended_at)
                         else local_time(row.ended_at, zone, "%H:%M"),
                         str(row.windows)] for row in sessions.itertuples()]
        self.sessions_table = _table(["Coder", "Device", "Mode", "Started", "Ended", "Windows"], session_rows)
        self.sessions_table.setFixedHeight(30 + 26 * max(1, min(4, len(session_rows))))
        right.addWidget(self._section(f"Sessions so far ({len(sessions)}, newest first; "
                                      f"Shift+PgUp/PgDn scrolls)", self.sessions_table))
        observations = self.store.observations(study.scheme.dimension_names)
        self.counts_table = count_table(study, code_counts(observations, study.scheme.dimension_names),
                                        window_counts(observations))
        self.counts_table.setMinimumHeight(120)
        right.addWidget(self._section(f"Observations per learner ({len(study.roster)}) and code",
                                      self.counts_table), 1)
        columns.addLayout(right, 5)
        self._layout.addLayout(columns, 1)

        keys = "<b>S</b> start a session"
        if self.interrupted is not None:
            keys += "  ·  <b>R</b> resume the interrupted session"
        keys += (f"  ·  <b>O</b> open another study  ·  {TABLE_KEYS_HINT}  ·  <b>F6</b> discreet  ·  <b>Ctrl+Q</b> quit")
        self.keys_label = QLabel(keys)
        self.keys_label.setWordWrap(True)
        self.keys_label.setProperty("role", "caption")
        self.keys_label.setStyleSheet("font-size: 13pt;")
        self._layout.addWidget(self.keys_label)

    @staticmethod
    def _section(title: str, body: QWidget) -> QWidget:
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.setContentsMargins(0, 4, 0, 0)
        heading = QLabel(title.upper())
        heading.setProperty("role", "caption")
        heading.setWordWrap(True)
        layout.addWidget(heading)
        layout.addWidget(body, 1)
        return box

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        key = event.key()
        if key == Qt.Key.Key_S:
            self.start_requested.emit()
        elif key == Qt.Key.Key_R and self.interrupted is not None:
            self.resume_requested.emit(self.interrupted.session_id)
        elif key == Qt.Key.Key_O:
            self.open_requested.emit()
        elif event.modifiers() & Qt.KeyboardModifier.ShiftModifier and key in SCROLL_KEYS:
            scroll_table(self.sessions_table, key)
        elif not scroll_table(self.counts_table, key):
            super().keyPressEvent(event)


def _discard(layout) -> None:
    """Delete a nested layout's widgets (refresh rebuilds everything)."""
    while layout.count():
        item = layout.takeAt(0)
        if item.widget():
            item.widget().deleteLater()
        elif item.layout():
            _discard(item.layout())
