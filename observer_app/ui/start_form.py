"""Start-session form: coder, device label, solo, paired or replay, who is present.

Paired runs share a pairing code: the form shows a fresh one, which one coder reads to
the other, who types it over their own.  The run then starts on a spoken countdown
(the default; the clocks need not agree) or, for coders whose clocks agree within a
second, on a typed wall-clock time (the clock check asks for the difference).
Tab moves between fields, Space ticks a learner, Enter starts, Escape goes back.
The window length is the study's (study.toml); it is shown, not chosen here, so
every coder of the study uses the same one.
"""
from __future__ import annotations

import socket
from dataclasses import dataclass
from datetime import datetime

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import (QComboBox, QFormLayout, QGridLayout, QLabel, QLineEdit, QListWidget, QListWidgetItem,
                               QSpinBox, QWidget)

from observer_app.coding.clock import Clock
from observer_app.coding.replay_plan import ReplayRule, parse_sample
from observer_app.coding.shared_start import (
    TYPED_START_BOUND_S, new_pairing_code, parse_shared_start, read_pairing_code, suggested_start_times,
)
from observer_app.study.folder import Study
from observer_app.ui.theme import busy_bar, titled_column
from sync.errors import InputError

SOLO, PAIRED = "Solo - I code alone", "Paired - start together on a spoken countdown"
PAIRED_TYPED = f"Paired - start at a typed time (clocks within {TYPED_START_BOUND_S:g} s)"
REPLAY = "Replay - code clips of the ticked learners' logs"


@dataclass(frozen=True)
class StartChoice:
    coder: str
    device: str
    paired_start: datetime | None
    present: tuple[str, ...]
    replay: bool = False  # code replayed log clips of the ticked learners instead of watching live
    pairing_id: str | None = None  # paired runs: the code both devices share
    signal: bool = False  # paired run starting on the spoken countdown (paired_start is then None)
    rule: ReplayRule | None = None  # replay: how clips are sampled and shared out (None: every clip, time order)


class StartForm(QWidget):
    started = Signal(object)  # StartChoice
    cancelled = Signal()

    def __init__(self, study: Study, clock: Clock, device: str | None = None) -> None:
        super().__init__()
        self.study = study
        self.clock = clock
        layout = titled_column(self, "Start a session", (48, 32, 48, 32))
        form = QFormLayout()
        form.setVerticalSpacing(14)
        self.coder = QLineEdit()
        self.coder.setPlaceholderText("your coder name or initials")
        self.device = QLineEdit(device or socket.gethostname())
        self.mode = QComboBox()
        self.mode.addItems([SOLO, PAIRED, PAIRED_TYPED, REPLAY])
        self.pairing = QLineEdit(new_pairing_code())
        self.pairing.setToolTip("Read this code to your partner, or type the code your partner reads to you")
        self.shared_start = QComboBox()
        self.shared_start.setEditable(True)
        self.shared_start.setToolTip("Both coders type or pick the same time (study time zone)")
        self.present = QListWidget()
        for learner, label in zip(study.roster["learner"].astype(str), study.roster["label"].astype(str)):
            item = QListWidgetItem(label)
            item.setData(Qt.ItemDataRole.UserRole, learner)
            item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
            item.setCheckState(Qt.CheckState.Checked)
            self.present.addItem(item)
        self.present.setCurrentRow(0)
        form.addRow("Coder", self.coder)
        form.addRow("Device label", self.device)
        form.addRow("Mode", self.mode)
        self.pairing_caption = QLabel("Pairing code (read yours out, or type your partner's)")
        form.addRow(self.pairing_caption, self.pairing)
        self.shared_start_caption = QLabel(f"Shared start ({study.timezone})")
        form.addRow(self.shared_start_caption, self.shared_start)
        form.addRow("Who is present (Space ticks)", self.present)
        self._add_replay_plan(form)
        form.addRow("Window length", QLabel(f"{study.window_seconds:g} s each, {study.order} order (from study.toml)"))
        layout.addLayout(form)
        self.error = QLabel("")
        self.error.setProperty("role", "warning")
        layout.addWidget(self.error)
        self.busy_label = QLabel("")
        self.busy = busy_bar()
        for widget in (self.busy_label, self.busy):
            widget.hide()
            layout.addWidget(widget)
        hint = QLabel("Tab next field  ·  Enter start  ·  Esc back")
        hint.setProperty("role", "caption")
        layout.addWidget(hint)
        layout.addStretch(1)
        self.mode.currentIndexChanged.connect(self._mode_changed)
        self._mode_changed()

    def showEvent(self, event) -> None:  # noqa: N802
        super().showEvent(event)
        self.shared_start.clear()
        self.shared_start.addItems(suggested_start_times(self.clock.now_utc(), self.study.timezone))
        self.coder.setFocus()

    def _add_replay_plan(self, form: QFormLayout) -> None:
        """Replay only: the sample, the fewest events a clip needs, the double-coded share, the coders."""
        self.sample = QLineEdit("5 per learner")
        self.sample.setPlaceholderText("5 per learner, 20% of all, or all")
        self.sample.setToolTip("5 = five clips per learner; 20% = a fifth of all clips; all = every clip")
        self.min_events = QSpinBox()
        self.min_events.setRange(1, 999)
        self.min_events.setPrefix("clips with at least ")
        self.min_events.setSuffix(" event(s)")
        self.double_share = QSpinBox()
        self.double_share.setRange(0, 100)
        self.double_share.setSuffix(" % double-coded")
        self.plan_coders = QLineEdit()
        self.plan_coders.setPlaceholderText("coders sharing the plan (default: you)")
        row = QWidget()
        grid = QGridLayout(row)  # two by two, so no field is squeezed below its text
        grid.setContentsMargins(0, 0, 0, 0)
        for number, widget in enumerate((self.sample, self.min_events, self.double_share, self.plan_coders)):
            grid.addWidget(widget, number // 2, number % 2)
        self.plan_caption = QLabel(f"Replay plan (seed {self.study.seed})")
        form.addRow(self.plan_caption, row)
        self.plan_row = row

    def replay_rule(self, coder: str, present: tuple[str, ...]) -> ReplayRule:
        """The plan the replay fields describe; InputError names the field to fix."""
        per_learner, share = parse_sample(self.sample.text())
        coders = tuple(dict.fromkeys(name.strip() for name in self.plan_coders.text().split(",") if name.strip()))
        return ReplayRule(learners=present, per_learner=per_learner, share=share, min_events=self.min_events.value(),
                          seed=self.study.seed, double_share=self.double_share.value() / 100,
                          coders=coders or (coder,))

    def _mode_changed(self) -> None:
        replay = self.mode.currentText() == REPLAY
        self.plan_row.setVisible(replay)
        self.plan_caption.setVisible(replay)
        paired = self.mode.currentText() in (PAIRED, PAIRED_TYPED)
        typed = self.mode.currentText() == PAIRED_TYPED
        self.pairing.setEnabled(paired)
        self.pairing_caption.setEnabled(paired)
        self.shared_start.setEnabled(typed)
        self.shared_start_caption.setEnabled(typed)

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.submit()
        elif event.key() == Qt.Key.Key_Escape:
            self.cancelled.emit()
        else:
            super().keyPressEvent(event)

    def set_busy(self, text: str) -> None:
        """Show that the start is under way (``text``), or, with "", that it is not; Enter is
        ignored meanwhile (a second start), Esc still goes back."""
        self.busy_label.setText(text)
        for widget in (self.busy_label, self.busy):
            widget.setVisible(bool(text))
        if text:
            self.error.setText("")

    def submit(self) -> None:
        if not self.busy.isHidden():  # (not isVisible: that also depends on the window being shown)
            return
        coder = self.coder.text().strip()
        if not coder:
            self.error.setText("Type the coder's name or initials.")
            self.coder.setFocus()
            return
        paired_start, pairing_id = None, None
        if self.mode.currentText() in (PAIRED, PAIRED_TYPED):
            try:
                pairing_id = read_pairing_code(self.pairing.text())
            except InputError as error:
                self.error.setText(error.line())
                self.pairing.setFocus()
                return
        if self.mode.currentText() == PAIRED_TYPED:
            try:
                paired_start = parse_shared_start(self.shared_start.currentText(), self.study.timezone,
                                                  self.clock.now_utc())
            except InputError as error:
                self.error.setText(error.line())
                self.shared_start.setFocus()
                return
        present = tuple(self.present.item(row).data(Qt.ItemDataRole.UserRole) for row in range(self.present.count())
                        if self.present.item(row).checkState() == Qt.CheckState.Checked)
        if not present:
            self.error.setText("Tick at least one learner who is present.")
            self.present.setFocus()
            return
        replay = self.mode.currentText() == REPLAY
        rule = None
        if replay:
            try:
                rule = self.replay_rule(coder, present)
            except InputError as error:
                self.error.setText(error.line())
                self.sample.setFocus()
                return
        self.error.setText("")
        self.started.emit(StartChoice(coder=coder, device=self.device.text().strip() or socket.gethostname(),
                                      paired_start=paired_start, present=present, replay=replay, rule=rule,
                                      pairing_id=pairing_id, signal=self.mode.currentText() == PAIRED))
