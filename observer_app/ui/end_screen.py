"""End of session: windows coded and missed, counts per learner and code, as stored; and for a
paired run whose partner session has been imported, the agreement between the two.

The agreement's bootstrap interval takes a while, so it is computed off the UI thread
(``BackgroundJob``): the screen shows its counts at once, says it is computing the
agreement, and keeps taking keys; the coder may leave before the figures arrive.
"""
from __future__ import annotations

from collections.abc import Callable

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import QLabel, QWidget

from agreement.statistics import estimate_text
from observer_app.coding.live import SessionSummary
from observer_app.coding.end_agreement import PartnerAgreement
from observer_app.study.folder import Study
from observer_app.ui.background import BackgroundJob
from observer_app.ui.overview import TABLE_KEYS_HINT, count_table, scroll_table
from observer_app.ui.theme import busy_bar, titled_column
from observer_app.ui.wording import counted

COMPUTING = "Computing agreement with your partner…"
NOT_IMPORTED = ("Paired run: once your partner's observations are imported (fieldmark import), "
                "your agreement shows here and in fieldmark agree.")
FAILED = "The agreement could not be computed here; fieldmark agree gives the full report."


class EndScreen(QWidget):
    done = Signal()
    failed = Signal(object, object)  # the exception computing the agreement raised, its traceback (MainWindow.show_error)

    def __init__(self, study: Study, summary: SessionSummary, *,
                 agreement: Callable[[], PartnerAgreement | None] | None = None, unit: str = "windows") -> None:
        """``agreement``: for a paired run, computes the agreement with the partner (run off the UI
        thread; it must open its own store); ``unit``: what the session coded, "windows" (live)
        or "clips" (replay)."""
        super().__init__()
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        layout = titled_column(self, "Session ended", (48, 24, 48, 16))
        self.figures = QLabel(
            f"{counted(summary.windows, unit)}  ·  {summary.coded_windows} coded  ·  {summary.missed_windows} "
            + ("skipped (no code)" if unit == "clips" else
               f"missed (ended with no code)  ·  {counted(summary.sync_marks, 'sync marks')}"))
        self.figures.setStyleSheet("font-size: 16pt;")
        self.figures.setWordWrap(True)
        layout.addWidget(self.figures)
        self.agreement = QLabel(COMPUTING if agreement is not None else "")
        self.agreement.setTextFormat(Qt.TextFormat.PlainText)  # coder names are shown as typed
        self.agreement.setWordWrap(True)
        self.agreement.setStyleSheet("font-size: 14pt;")
        layout.addWidget(self.agreement)
        self.busy = busy_bar()
        self.busy.setVisible(agreement is not None)
        layout.addWidget(self.busy)
        self.table = count_table(study, summary.counts, summary.per_learner, only_counted=True)
        layout.addWidget(self.table, 1)
        self.keys_label = QLabel(f"Every code above is read back from the store.  ·  {TABLE_KEYS_HINT}  ·  "
                                 f"<b>Enter</b> or <b>Esc</b> back to the study")
        self.keys_label.setWordWrap(True)
        self.keys_label.setProperty("role", "caption")
        layout.addWidget(self.keys_label)
        self.job: BackgroundJob | None = None
        if agreement is not None:
            self.job = BackgroundJob(agreement)
            self.job.finished.connect(self.show_agreement)
            self.job.failed.connect(self._agreement_failed)
            self.job.start()

    def show_agreement(self, agreement: PartnerAgreement | None) -> None:
        """The figures, or how to get them when the partner's session is not in the store yet."""
        self.busy.hide()
        if agreement is None:
            self.agreement.setText(NOT_IMPORTED)
            return
        figures = "  ·  ".join(f"{name}: kappa {estimate_text(kappa)} ({agreement.band[name]})"
                               for name, kappa in agreement.kappa.items())
        self.agreement.setText(f"Agreement with {', '.join(agreement.partners)} over "
                               f"{counted(agreement.units, 'windows')}:  {figures}")

    def _agreement_failed(self, error: BaseException) -> None:
        self.busy.hide()
        self.agreement.setText(FAILED)
        self.failed.emit(error, error.__traceback__)

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter, Qt.Key.Key_Escape):
            self.done.emit()
        elif not scroll_table(self.table, event.key()):
            super().keyPressEvent(event)
