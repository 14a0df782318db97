"""Tolerance study of the parts shown: Monte Carlo yield, worst-corner PM histogram, sensitivity.

Everything is computed by :mod:`loopkit.montecarlo` in a worker thread (progress, cancel keeps
the draws finished); the dialog only shows it: the yield with its Wilson and Clopper-Pearson
intervals, a histogram of each draw's worst-corner phase margin, the sensitivity ranking, and the
loop gain's envelope over the draws, shaded on the main Bode plot.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import (
    QDialogButtonBox,
    QHBoxLayout,
    QLabel,
    QProgressBar,
    QPushButton,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
)

from loopkit.loop import apply_parts
from loopkit.montecarlo import loop_envelope, monte_carlo, prepare_study, sensitivity, worst_corner

from .background import BackgroundDialog, BackgroundWorker

__all__ = ["ENVELOPE_DRAWS", "StudyDialog", "StudyWorker"]

#: Draws whose loops make the Bode plot's envelope (the first ones of the run).
ENVELOPE_DRAWS = 300


class StudyWorker(BackgroundWorker):
    """The tolerance study of the parts shown: a dict of library results when done."""

    WHAT = "compute this study"

    def __init__(self, design, result, draws: int, random_state: int):
        super().__init__()
        self._design = apply_parts(design, result)  # the parts shown, as built
        self._draws, self._random_state = draws, random_state

    def compute(self):
        def progress(done, total):
            self.report(done, total)
            if self.cancelled():
                raise KeyboardInterrupt  # monte_carlo keeps the chunks finished

        study = prepare_study(self._design)
        mc = monte_carlo(study, self._draws, self._random_state, progress=progress)
        sens = sensitivity(study, mc)
        env = loop_envelope(study, mc.values[:ENVELOPE_DRAWS]) if mc.n else None
        return {"study": study, "mc": mc, "sensitivity": sens, "envelope": env}


class StudyDialog(BackgroundDialog):
    """Yield, worst-corner PM histogram and sensitivity of the parts shown, over the design's tolerances."""

    VERB = "study"
    STOPPED = "Study stopped"

    def __init__(self, model, bode=None, parent=None):
        super().__init__(model, parent)
        self.setWindowTitle("Tolerance study")
        self.resize(820, 720)
        self._bode = bode
        layout = QVBoxLayout(self)
        row = QHBoxLayout()
        row.addWidget(QLabel("Draws"))
        self.draws = QSpinBox()
        self.draws.setRange(10, 1_000_000)
        self.draws.setValue(1000)
        row.addWidget(self.draws)
        row.addWidget(QLabel("Random state"))
        self.random_state = QSpinBox()
        self.random_state.setRange(0, 2**31 - 1)
        row.addWidget(self.random_state)
        self.run_button = QPushButton("Run")
        self.run_button.clicked.connect(self.start)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setEnabled(False)
        self.cancel_button.clicked.connect(self.cancel)
        row.addWidget(self.run_button)
        row.addWidget(self.cancel_button)
        self.progress = QProgressBar()
        row.addWidget(self.progress, 1)
        layout.addLayout(row)
        self.status = QLabel("The parts shown, varied by the design file's [tolerances] (parts: their series'"
                             " tolerance); a draw passes when every corner meets every target.")
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self.yield_label = QLabel("")
        self.yield_label.setWordWrap(True)
        layout.addWidget(self.yield_label)
        self.canvas = pg.GraphicsLayoutWidget()
        self.histogram = self.canvas.addPlot(row=0, col=0)
        self.histogram.getAxis("bottom").setLabel("Worst-corner phase margin (°)")
        self.histogram.getAxis("left").setLabel("Draws")
        self.histogram.showGrid(x=True, y=True, alpha=0.2)
        layout.addWidget(self.canvas, 1)
        self.table = QTableWidget(0, 5)
        self.table.setHorizontalHeaderLabels(["Quantity", "PM at low (°)", "PM at high (°)", "Drop (°)", "Spearman"])
        self.table.verticalHeader().setVisible(False)
        layout.addWidget(self.table, 1)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)

    def make_worker(self, result) -> StudyWorker:
        return StudyWorker(self._model.design, result, self.draws.value(), self.random_state.value())

    def show_results(self, data: dict) -> None:
        mc = data["mc"]
        if not mc.n:
            self.status.setText("Cancelled before the first draws finished.")
            return
        lo, hi = mc.wilson
        cl, ch = mc.clopper_pearson
        note = f" (cancelled after {mc.n} of {mc.requested} draws)" if mc.cancelled else ""
        kept = data["study"].controller_note
        self.status.setText(f"{mc.n} draws, random state {mc.random_state}{note}."
                            + (f" Controller kept: {kept}; the plant varies." if kept else ""))
        self.yield_label.setText(
            f"Yield {100 * mc.yield_fraction:.1f} % ({int(np.sum(mc.passed))} of {mc.n} meet every target at every"
            f" corner); 95 % interval: Wilson {100 * lo:.1f}–{100 * hi:.1f} %, Clopper-Pearson"
            f" {100 * cl:.1f}–{100 * ch:.1f} %. Worst corner at nominal values:"
            f" {float(worst_corner(data['study'].nominal)['pm_deg'][0]):.1f}°.")
        pm = mc.worst["pm_deg"]
        counts, edges = np.histogram(pm, bins=min(40, max(5, mc.n // 10)))
        self.histogram.clear()
        self.histogram.addItem(pg.BarGraphItem(x0=edges[:-1], x1=edges[1:], height=counts, brush="#6a8caf"))
        target = data["study"].targets.pm_deg
        self.histogram.addItem(pg.InfiniteLine(target, angle=90, pen=pg.mkPen("#b03030", width=1)))
        sens = data["sensitivity"]
        self.table.setRowCount(len(sens))
        for i, s in enumerate(sens):
            cells = [s.key, f"{s.pm_low_deg:.1f}", f"{s.pm_high_deg:.1f}", f"{s.effect_deg:.2f}",
                     "–" if np.isnan(s.rank_correlation) else f"{s.rank_correlation:+.2f}"]
            for j, text in enumerate(cells):
                self.table.setItem(i, j, QTableWidgetItem(text))
        self.table.resizeColumnsToContents()
        if self._bode is not None and data["envelope"] is not None:
            self._bode.set_envelope(data["envelope"])
