"""Tolerance study of the parts shown: Monte Carlo yield, worst-corner PM histogram, sensitivity.

Everything is computed by :mod:`loopkit.montecarlo` in a worker thread (progress, cancel keeps
the draws finished); the dialog only shows it: the yield with its Wilson and Clopper-Pearson
intervals, a histogram of each draw's worst-corner phase margin, the sensitivity ranking, and the
loop gain's envelope over the draws, shaded on the main Bode plot.
"""

from __future__ import annotations

import sys
import threading
import traceback

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QObject, QThread, Signal
from PySide6.QtWidgets import (
    QDialog,
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

from loopkit import DesignError
from loopkit.loop import apply_parts
from loopkit.montecarlo import loop_envelope, monte_carlo, prepare_study, sensitivity, worst_corner

__all__ = ["ENVELOPE_DRAWS", "StudyDialog", "StudyWorker"]

#: Draws whose loops make the Bode plot's envelope (the first ones of the run).
ENVELOPE_DRAWS = 300


class StudyWorker(QObject):
    """Runs a study in a QThread; emits progress (0-100) and a dict of library results when done."""

    progress = Signal(int)
    finished = Signal(object)  # {"study", "mc", "sensitivity", "envelope"}
    failed = Signal(str)

    def __init__(self, design, result, draws: int, random_state: int):
        super().__init__()
        self._design = apply_parts(design, result)  # the parts shown, as built
        self._draws, self._random_state = draws, random_state
        self._cancel = threading.Event()

    def cancel(self) -> None:
        self._cancel.set()

    def run(self) -> None:
        def progress(done, total):
            self.progress.emit(int(100 * done / total))
            if self._cancel.is_set():
                raise KeyboardInterrupt  # monte_carlo keeps the chunks finished

        try:
            study = prepare_study(self._design)
            mc = monte_carlo(study, self._draws, self._random_state, progress=progress)
            sens = sensitivity(study, mc)
            env = loop_envelope(study, mc.values[:ENVELOPE_DRAWS]) if mc.n else None
        except DesignError as exc:
            self.failed.emit(str(exc))
            return
        except Exception as exc:  # noqa: BLE001 - reported in the dialog (and logged): a loopkit bug
            traceback.print_exception(exc, file=sys.stderr)
            self.failed.emit(f"loopkit could not compute this study ({type(exc).__name__}: {exc}); please report it"
                             f" with the design file.")
            return
        self.finished.emit({"study": study, "mc": mc, "sensitivity": sens, "envelope": env})


class StudyDialog(QDialog):
    """Yield, worst-corner PM histogram and sensitivity of the parts shown, over the design's tolerances."""

    def __init__(self, model, bode=None, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Tolerance study")
        self.resize(820, 720)
        self._model, self._bode = model, bode
        self._thread: QThread | None = None
        self._worker: StudyWorker | None = None
        self.data = None
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

    def start(self) -> None:
        result = self._model.result
        if result is None or not result.feasible:
            self.status.setText("No parts to study: the targets are not feasible.")
            return
        self.run_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress.setValue(0)
        self.status.setText("Running…")
        self._thread = QThread(self)
        self._worker = StudyWorker(self._model.design, result, self.draws.value(), self.random_state.value())
        self._worker.moveToThread(self._thread)
        self._thread.started.connect(self._worker.run)
        self._worker.progress.connect(self.progress.setValue)
        self._worker.finished.connect(self._on_study_finished)
        self._worker.failed.connect(self._on_study_failed)
        self._worker.finished.connect(self._thread.quit)
        self._worker.failed.connect(self._thread.quit)
        self._thread.start()

    def cancel(self) -> None:
        if self._worker is not None:
            self._worker.cancel()

    def is_running(self) -> bool:
        return self._thread is not None and self._thread.isRunning()

    def _done(self) -> None:
        self.run_button.setEnabled(True)
        self.cancel_button.setEnabled(False)

    def _on_study_failed(self, message: str) -> None:
        self._done()
        self.status.setText(f"Study stopped: {message}")

    def _on_study_finished(self, data: dict) -> None:
        self._done()
        self.data = data
        mc = data["mc"]
        if not mc.n:
            self.status.setText("Cancelled before the first draws finished.")
            return
        lo, hi = mc.wilson
        cl, ch = mc.clopper_pearson
        note = f" (cancelled after {mc.n} of {mc.requested} draws)" if mc.cancelled else ""
        self.status.setText(f"{mc.n} draws, random state {mc.random_state}{note}.")
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

    def closeEvent(self, event) -> None:
        self.cancel()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(10000)
        super().closeEvent(event)

    def reject(self) -> None:
        self.cancel()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(10000)
        super().reject()
