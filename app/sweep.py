"""Dense input-voltage sweep of the current parts, off the UI thread, with progress and cancel.

The sweep itself is the library's (:func:`loopkit.sweep.vin_sweep`: the parts the
app shows, fixed, over many input voltages in blocks that fit a memory budget),
so the curves are the same numbers the corner table and ``loopkit sweep`` show.
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
    QVBoxLayout,
)

from loopkit import format_value
from loopkit.sweep import sweep_design, vin_sweep

from .background import BackgroundDialog, BackgroundWorker
from .plots import load_styles, vin_colour_map

__all__ = ["SweepDialog", "SweepWorker", "sweep_design"]



class SweepWorker(BackgroundWorker):
    """The dense sweep (:func:`loopkit.sweep.vin_sweep`); its margins arrays as a dict when done."""

    WHAT = "compute this sweep"

    def __init__(self, design, result, points: int):
        super().__init__()
        lo, hi = min(design.operating.vin), max(design.operating.vin)
        self._vin = np.linspace(lo, hi, points) if hi > lo else np.array([lo])
        self._design, self._result = design, result

    def compute(self):
        swept = vin_sweep(self._design, self._result, self._vin, self.report, self.cancelled)
        return None if swept.cancelled else {**swept.as_dict(), "controller": swept.controller}


class SweepDialog(BackgroundDialog):
    """Phase margin and crossover against input voltage, for each load, with the current parts."""

    VERB = "sweep"
    STOPPED = "Sweep stopped"

    def __init__(self, model, parent=None):
        super().__init__(model, parent)
        self.setWindowTitle("Dense input-voltage sweep")
        self.resize(900, 620)
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

    def make_worker(self, result) -> SweepWorker:
        return SweepWorker(self._model.design, result, self.points.value())

    def show_results(self, data: dict) -> None:
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
        no_gm = not np.any(np.isfinite(data["gm_db"]))  # an empty plot with made-up ticks would look like a fault
        self.gm_plot.getAxis("left").setStyle(showValues=not no_gm)
        if no_gm:
            where = "fs/2 (the sampled loop ends there)" if data.get("controller") else "fsw/2"
            note = pg.TextItem(f"No gain margin at any swept point: the phase reaches -180° only above {where}, or"
                               " never (the corner table says which)", color=(90, 90, 90), anchor=(0.5, 0.5))
            self.gm_plot.addItem(note)
            note.setPos(0.5 * (data["vin"].min() + data["vin"].max()), 0.5)
            self.gm_plot.setYRange(0.0, 1.0)
        else:
            self.gm_plot.enableAutoRange(axis="y")
        k = int(np.nanargmin(data["pm_deg"])) if np.any(np.isfinite(data["pm_deg"])) else 0
        self.status.setText(
            f"{len(data['vin'])} corners. Lowest phase margin {data['pm_deg'][k]:.1f}° at "
            f"{format_value(data['vin'][k], 'V')}, {format_value(data['load'][k], 'A')}."
            + (f" Controller kept: {data['controller']}." if data.get("controller") else ""))
