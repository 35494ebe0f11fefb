"""Study overview: roster, scheme, sessions so far, observations per learner and per code.

Also where the cautions live, and where an interrupted session is offered for resuming.
Keys: S start a session, R resume, O open another study (handled by the main window).
"""
from __future__ import annotations

import zoneinfo

import pandas as pd
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import (QAbstractItemView, QAbstractSlider, QFrame, QGridLayout, QHeaderView, QLabel, QScrollArea,
                               QSizePolicy, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

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
}


def _table(headers: list[str], rows: list[list[str]]) -> QTableWidget:
    table = QTableWidget(len(rows), len(headers))
    table.setHorizontalHeaderLabels(headers)
    table.verticalHeader().hide()
    table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
    table.setFocusPolicy(Qt.FocusPolicy.NoFocus)
    table.setShowGrid(False)
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


def session_mode(row) -> str:
    """How the sessions table names a session's mode: replay, paired or solo."""
    if row.mode == "replay":
        return "replay"
    return "paired" if row.paired else "solo"


def count_table(study: Study, counts: pd.DataFrame, per_learner: pd.DataFrame) -> QTableWidget:
    """Codes down the side, learners (roster labels) across: windows, missed, then each code."""
    learners = [learner for learner in study.roster["learner"].astype(str)]
    labels = dict(zip(study.roster["learner"].astype(str), study.roster["label"].astype(str)))
    windows = per_learner.set_index("learner") if len(per_learner) else pd.DataFrame(
        columns=["windows", "missed_windows"])
    lookup = {(str(r.learner), str(r.dimension), str(r.code)): int(r.count) for r in counts.itertuples()}
    rows = [["Windows"] + [str(int(windows["windows"].get(learner, 0))) for learner in learners]
            + [str(int(windows["windows"].sum()))],
            ["Missed (no code)"] + [str(int(windows["missed_windows"].get(learner, 0))) for learner in learners]
            + [str(int(windows["missed_windows"].sum()))]]
    for dimension in study.scheme.dimensions:
        for code in dimension.codes:
            values = [lookup.get((learner, dimension.name, code.name), 0) for learner in learners]
            rows.append([f"{dimension.name} · {code.label}"] + [str(v) for v in values] + [str(sum(values))])
    return _table([""] + [labels[learner] for learner in learners] + ["All"], rows)


class StudyOverview(QWidget):
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
        scroller = QScrollArea()
        scroller.setWidgetResizable(True)
        scroller.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.scroller = scroller
        scroller.setFrameShape(QFrame.Shape.NoFrame)
        scroller.setFocusPolicy(Qt.FocusPolicy.NoFocus)
        content = QWidget()
        scroller.setWidget(content)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(0, 0, 0, 0)
        outer.addWidget(scroller)
        self._layout = QVBoxLayout(content)
        self._layout.setContentsMargins(32, 24, 32, 16)
        self.refresh()

    def refresh(self) -> None:
        """Rebuild every section from the study folder and the store."""
        while self._layout.count():
            item = self._layout.takeAt(0)
            if item.widget():
                item.widget().deleteLater()
        study = self.study
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
            zone = zoneinfo.ZoneInfo(study.timezone)
            kind = "paired run" if self.interrupted.paired_start is not None else "solo"
            self.resume_banner.setText(
                f"<b>A session was interrupted</b> ({kind}, coder {self.interrupted.coder}, "
                f"device {self.interrupted.device}, "
                f"started {local_time(self.interrupted.started_at, zone, '%Y-%m-%d %H:%M')}, codes saved: {self.interrupted.codes_saved}). "
                f"Press <b>R</b> to resume it at the right slot.")
            self.resume_banner.setProperty("role", "warning")
            self.resume_banner.setWordWrap(True)
            self.resume_banner.setStyleSheet("font-size: 15pt; padding: 8px;")
            self._layout.addWidget(self.resume_banner)

        grid = QGridLayout()
        grid.setHorizontalSpacing(24)
        roster = study.roster
        self.roster_table = _table(list(roster.columns), roster.astype(str).values.tolist())
        self.roster_table.setMinimumHeight(150)
        grid.addWidget(self._section("Roster", self.roster_table), 0, 0)
        scheme_lines = []
        for dimension in study.scheme.dimensions:
            codes = "  ".join(f"<span style='color:{c.colour}'>■</span>&nbsp;<b>{c.key.upper()}</b>&nbsp;{c.label}"
                              for c in dimension.codes)
            scheme_lines.append(f"<p><b>{dimension.name}</b> ({dimension.level}): {codes}</p>")
        scheme = QLabel("".join(scheme_lines))
        scheme.setWordWrap(True)
        scheme.setAlignment(Qt.AlignmentFlag.AlignTop | Qt.AlignmentFlag.AlignLeft)
        grid.addWidget(self._section("Code scheme", scheme), 1, 0)
        cautions = QLabel("<b>Before you observe</b>" + cautions_html())
        cautions.setWordWrap(True)
        cautions.setStyleSheet("font-size: 11pt;")
        panel = QFrame()
        panel.setProperty("role", "panel")
        panel.setSizePolicy(QSizePolicy.Policy.Preferred, QSizePolicy.Policy.Minimum)
        QVBoxLayout(panel).addWidget(cautions)
        grid.addWidget(panel, 2, 0)
        sessions = session_table(self.store)
        zone = zoneinfo.ZoneInfo(study.timezone)
        session_rows = [[row.coder, row.device, session_mode(row),
                         local_time(row.started_at, zone, "%Y-%m-%d %H:%M"),
                         ("imported" if row.imported else "interrupted") if pd.isna(row.ended_at)
                         else local_time(row.ended_at, zone, "%H:%M"),
                         str(row.windows)] for row in sessions.itertuples()]
        self.sessions_table = _table(["Coder", "Device", "Mode", "Started", "Ended", "Windows"], session_rows)
        grid.addWidget(self._section(f"Sessions so far ({len(sessions)})", self.sessions_table), 0, 1)
        observations = self.store.observations(study.scheme.dimension_names)
        self.counts_table = count_table(study, code_counts(observations, study.scheme.dimension_names),
                                        window_counts(observations))
        self.counts_table.setMinimumHeight(300)
        grid.addWidget(self._section("Observations per learner and code", self.counts_table), 1, 1, 2, 1)
        grid.setColumnStretch(0, 3)
        grid.setColumnStretch(1, 6)
        grid.setRowStretch(0, 3)
        grid.setRowStretch(1, 2)
        grid.setRowStretch(2, 3)
        self._layout.addLayout(grid, 1)
        keys = "<b>S</b> start a session"
        if self.interrupted is not None:
            keys += "  ·  <b>R</b> resume the interrupted session"
        keys += ("  ·  <b>O</b> open another study  ·  <b>Page Up/Down</b> scroll  ·  <b>F6</b> discreet mode"
                 "  ·  <b>Ctrl+Q</b> quit")
        hint = QLabel(keys)
        hint.setProperty("role", "caption")
        self._layout.addWidget(hint)

    @staticmethod
    def _section(title: str, body: QWidget) -> QWidget:
        box = QWidget()
        layout = QVBoxLayout(box)
        layout.setContentsMargins(0, 8, 0, 0)
        heading = QLabel(title.upper())
        heading.setProperty("role", "caption")
        layout.addWidget(heading)
        layout.addWidget(body, 1)
        return box

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() == Qt.Key.Key_S:
            self.start_requested.emit()
        elif event.key() == Qt.Key.Key_R and self.interrupted is not None:
            self.resume_requested.emit(self.interrupted.session_id)
        elif event.key() == Qt.Key.Key_O:
            self.open_requested.emit()
        elif event.key() in SCROLL_KEYS:
            self.scroller.verticalScrollBar().triggerAction(SCROLL_KEYS[event.key()])
        else:
            super().keyPressEvent(event)
