"""Dense input-voltage sweep of the current parts, off the UI thread, with progress and cancel.

The sweep itself is the library's (:func:`loopkit.sweep.vin_sweep`: the parts the
app shows, fixed, over many input voltages in blocks that fit a memory budget),
so the curves are the same numbers the corner table and ``loopkit sweep`` show.
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
    QVBoxLayout,
)

from loopkit import DesignError, format_value
from loopkit.sweep import sweep_design, vin_sweep

from .plots import load_styles, vin_colour_map

__all__ = ["SweepDialog", "SweepWorker", "sweep_design"]



class SweepWorker(QObject):
    """Runs the sweep in a QThread; emits progress (0-100) and the margins arrays when done."""

    progress = Signal(int)
    finished = Signal(object)  # dict with vin, load, fc_hz, pm_deg, gm_db (arrays by corner)
    failed = Signal(str)

    def __init__(self, design, result, points: int):
        super().__init__()
        lo, hi = min(design.operating.vin), max(design.operating.vin)
        self._vin = np.linspace(lo, hi, points) if hi > lo else np.array([lo])
        self._design, self._result = design, result
        self._cancel = threading.Event()

    def cancel(self) -> None:
        self._cancel.set()

    def run(self) -> None:
        def progress(done, total):
            self.progress.emit(int(100 * done / total))

        try:
            swept = vin_sweep(self._design, self._result, self._vin, progress, self._cancel.is_set)
        except DesignError as exc:
            self.failed.emit(str(exc))
            return
        except Exception as exc:  # noqa: BLE001 - reported in the dialog (and logged): a loopkit bug
            traceback.print_exception(exc, file=sys.stderr)
            self.failed.emit(f"loopkit could not compute this sweep ({type(exc).__name__}: {exc}); please report it"
                             f" with the design file.")
            return
        if swept.cancelled:
            self.failed.emit("cancelled")
            return
        self.finished.emit(swept.as_dict())


class SweepDialog(QDialog):
    """Phase margin and crossover against input voltage, for each load, with the current parts."""

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Dense input-voltage sweep")
        self.resize(900, 620)
        self._model = model
        self._thread: QThread | None = None
        self._worker: SweepWorker | None = None
        self.data = None
        layout = QVBoxLayout(self)
        row = QHBoxLayout()
        row.addWidget(QLabel("Input voltages"))
        self.points = QSpinBox()
        self.points.setRange(5, 5000)
        self.points.setValue(400)
        row.addWidget(self.points)
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
        self.status = QLabel("Sweeps the input from its lowest to its highest value with the parts shown now.")
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self.canvas = pg.GraphicsLayoutWidget()
        self.pm_plot = self.canvas.addPlot(row=0, col=0)
        self.gm_plot = self.canvas.addPlot(row=1, col=0)
        self.fc_plot = self.canvas.addPlot(row=2, col=0)
        for p in (self.gm_plot, self.fc_plot):
            p.setXLink(self.pm_plot)
        self.pm_plot.getAxis("left").setLabel("Phase margin (°)")
        self.gm_plot.getAxis("left").setLabel("Gain margin (dB)")
        self.fc_plot.getAxis("left").setLabel("Crossover", units="Hz")
        self.fc_plot.getAxis("bottom").setLabel("Input voltage (V)")
        for p in (self.pm_plot, self.gm_plot, self.fc_plot):
            p.showGrid(x=True, y=True, alpha=0.2)
            p.getAxis("left").setWidth(70)
        self.legend = self.pm_plot.addLegend(offset=(-8, 8), labelTextSize="8pt")
        layout.addWidget(self.canvas, 1)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)

    def start(self) -> None:
        result = self._model.result
        if result is None or not result.feasible:
            self.status.setText("No parts to sweep: the targets are not feasible.")
            return
        self.run_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress.setValue(0)
        self.status.setText("Running…")
        self._thread = QThread(self)
        self._worker = SweepWorker(self._model.design, result, self.points.value())
        self._worker.moveToThread(self._thread)
        self._thread.started.connect(self._worker.run)
        self._worker.progress.connect(self.progress.setValue)
        self._worker.finished.connect(self._on_sweep_finished)
        self._worker.failed.connect(self._on_sweep_failed)
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

    def _on_sweep_failed(self, message: str) -> None:
        self._done()
        self.status.setText(f"Sweep stopped: {message}")

    def _on_sweep_finished(self, data: dict) -> None:
        self._done()
        self.data = data
        for p in (self.pm_plot, self.gm_plot, self.fc_plot):
            p.clear()
        self.legend.clear()
        styles = load_styles(data["load"])
        cmap = vin_colour_map()
        colour = cmap.map(0.35, mode="qcolor")
        for load, style in sorted(styles.items(), key=lambda kv: -kv[0]):
            sel = data["load"] == load
            pen = pg.mkPen(colour, width=1.5, style=style)
            self.pm_plot.plot(data["vin"][sel], data["pm_deg"][sel], pen=pen, name=f"load {format_value(load, 'A')}")
            self.fc_plot.plot(data["vin"][sel], data["fc_hz"][sel], pen=pen)
            gm = np.where(np.isfinite(data["gm_db"][sel]), data["gm_db"][sel], np.nan)  # no phase crossover: gap
            self.gm_plot.plot(data["vin"][sel], gm, pen=pen, connect="finite")
        k = int(np.nanargmin(data["pm_deg"])) if np.any(np.isfinite(data["pm_deg"])) else 0
        self.status.setText(
            f"{len(data['vin'])} corners. Lowest phase margin {data['pm_deg'][k]:.1f}° at "
            f"{format_value(data['vin'][k], 'V')}, {format_value(data['load'][k], 'A')}.")

    def closeEvent(self, event) -> None:
        self.cancel()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(5000)
        super().closeEvent(event)

    def reject(self) -> None:
        self.cancel()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(5000)
        super().reject()
