"""End of session: windows coded and missed, counts per learner and code, as stored; and for a
paired run whose partner session has been imported, the agreement between the two."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from agreement.statistics import estimate_text
from observer_app.coding.live import SessionSummary
from observer_app.coding.end_agreement import PartnerAgreement
from observer_app.study.folder import Study
from observer_app.ui.overview import TABLE_KEYS_HINT, count_table, scroll_table


class EndScreen(QWidget):
    done = Signal()

    def __init__(self, study: Study, summary: SessionSummary, *, paired: bool = False,
                 agreement: PartnerAgreement | None = None, unit: str = "windows") -> None:
        """``unit``: what the session coded, "windows" (live) or "clips" (replay)."""
        super().__init__()
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(48, 24, 48, 16)
        title = QLabel("Session ended")
        title.setProperty("role", "title")
        layout.addWidget(title)
        self.figures = QLabel(
            f"{summary.windows} {unit}  ·  {summary.coded_windows} coded  ·  {summary.missed_windows} "
            + ("skipped (no code)" if unit == "clips" else
               f"missed (ended with no code)  ·  {summary.sync_marks} sync marks"))
        self.figures.setStyleSheet("font-size: 16pt;")
        self.figures.setWordWrap(True)
        layout.addWidget(self.figures)
        self.agreement = QLabel(self._agreement_text(paired, agreement))
        self.agreement.setWordWrap(True)
        self.agreement.setStyleSheet("font-size: 14pt;")
        layout.addWidget(self.agreement)
        self.table = count_table(study, summary.counts, summary.per_learner, only_counted=True)
        layout.addWidget(self.table, 1)
        self.keys_label = QLabel(f"Every code above is read back from the store.  ·  {TABLE_KEYS_HINT}  ·  "
                                 f"<b>Enter</b> or <b>Esc</b> back to the study")
        self.keys_label.setWordWrap(True)
        self.keys_label.setProperty("role", "caption")
        layout.addWidget(self.keys_label)

    @staticmethod
    def _agreement_text(paired: bool, agreement: PartnerAgreement | None) -> str:
        if not paired:
            return ""
        if agreement is None:
            return ("Paired run: once your partner's observations are imported (fieldmark import), "
                    "your agreement shows here and in fieldmark agree.")
        figures = "  ·  ".join(f"{name}: kappa {estimate_text(kappa)} ({agreement.band[name]})"
                               for name, kappa in agreement.kappa.items())
        return f"Agreement with {', '.join(agreement.partners)} over {agreement.units} windows:  {figures}"

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter, Qt.Key.Key_Escape):
            self.done.emit()
        elif not scroll_table(self.table, event.key()):
            super().keyPressEvent(event)
