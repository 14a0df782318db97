"""The review report's optional sections, chosen before the report is written (File > Export review report...).

Only choices: the sections themselves are made by :func:`loopkit.report.sections.review_sections`,
the same call ``loopkit report`` makes (``--no-efficiency``, ``--tolerance-draws``,
``--random-state``, ``--robust``, ``--switching``).
"""

from __future__ import annotations

from dataclasses import dataclass

from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QSpinBox,
    QVBoxLayout,
)

__all__ = ["ReportOptions", "ReportOptionsDialog"]


@dataclass(frozen=True)
class ReportOptions:
    """What ``review_sections`` is asked for (0 draws: no tolerance study)."""

    efficiency: bool = True
    tolerance_draws: int = 0
    random_state: int = 0
    switching: bool = False
    robust: bool = False

    def keywords(self) -> dict:
        """The keyword arguments of :func:`loopkit.report.sections.review_sections`."""
        return {"efficiency": self.efficiency, "tolerance_draws": self.tolerance_draws,
                "random_state": self.random_state, "switching": self.switching, "robust": self.robust}


class ReportOptionsDialog(QDialog):
    """Check boxes for the efficiency, tolerance-study and switching-check sections."""

    def __init__(self, has_tolerances: bool, has_parts: bool, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Review report sections")
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("The report always has the design, the network, the Bode plots, the margins,"
                                " the load step and the findings. Add:"))
        self.efficiency = QCheckBox("Efficiency and losses per corner")
        self.efficiency.setChecked(True)
        self.tolerance = QCheckBox("Tolerance study (Monte Carlo yield, sensitivity, worst case)")
        self.tolerance.setEnabled(has_tolerances)
        if not has_tolerances:
            self.tolerance.setToolTip("The design has no [tolerances] table")
        self.draws = QSpinBox()
        self.draws.setRange(10, 100_000)
        self.draws.setValue(500)
        self.draws.setSingleStep(100)
        self.random_state = QSpinBox()
        self.random_state.setRange(0, 2_000_000_000)
        self.robust = QCheckBox("with the robust compensator beside the nominal one")
        self.switching = QCheckBox("Switching check (every corner's steady state; loop gain at the design corner)")
        self.switching.setEnabled(has_parts)
        for w in (self.efficiency, self.tolerance):
            layout.addWidget(w)
        form = QFormLayout()
        form.addRow("Monte Carlo draws", self.draws)
        form.addRow("Random state", self.random_state)
        form.addRow("", self.robust)
        layout.addLayout(form)
        layout.addWidget(self.switching)
        layout.addWidget(QLabel("The tolerance study and the switching check take from seconds to minutes."))
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)
        self.tolerance.toggled.connect(self._enable)
        self._enable()

    def _enable(self) -> None:
        on = self.tolerance.isChecked()
        self.draws.setEnabled(on)
        self.random_state.setEnabled(on)
        self.robust.setEnabled(on)

    def options(self) -> ReportOptions:
        """The choices made."""
        return ReportOptions(self.efficiency.isChecked(), self.draws.value() if self.tolerance.isChecked() else 0,
                             self.random_state.value(), self.switching.isChecked() and self.switching.isEnabled(),
                             self.tolerance.isChecked() and self.robust.isChecked())
