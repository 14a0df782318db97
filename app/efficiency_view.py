"""Efficiency per corner: a table of the loss breakdown and efficiency against load per input voltage.

A view of :func:`loopkit.efficiency.efficiency` and
:func:`loopkit.efficiency.efficiency_curves` (the same numbers as
``loopkit efficiency``); it follows the model's design.  No formula here.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QSignalBlocker
from PySide6.QtWidgets import QDialog, QLabel, QSplitter, QTableWidget, QTableWidgetItem, QVBoxLayout

from loopkit import DesignError, format_value
from loopkit.efficiency import LOSS_TITLES, efficiency, efficiency_curves
from loopkit.loss_model import LOSS_FIELDS

from .plots import vin_colour_map

__all__ = ["EfficiencyDialog", "open_efficiency"]

_FIXED = ("Vin", "Load", "Mode", "Duty %", "Pout", "Losses", "Eff %")


class EfficiencyDialog(QDialog):
    """Loss breakdown per corner and efficiency curves of the model's design, kept up to date."""

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self.setObjectName("efficiency_dialog")
        self.setWindowTitle("Efficiency per corner")
        self.resize(1000, 700)
        self.model = model
        self.table = QTableWidget(self)
        self.table.setObjectName("efficiency_table")
        self.table.setEditTriggers(QTableWidget.EditTrigger.NoEditTriggers)
        self.plot = pg.PlotWidget(self)
        self.plot.setObjectName("efficiency_plot")
        self.plot.setLogMode(x=True, y=False)
        self.plot.setLabel("bottom", "load (A)")
        self.plot.setLabel("left", "efficiency (%)")
        self.plot.getAxis("bottom").enableAutoSIPrefix(False)
        self.plot.addLegend()
        self.notes = QLabel(self)
        self.notes.setWordWrap(True)
        split = QSplitter(self)
        split.setOrientation(pg.QtCore.Qt.Orientation.Vertical)
        split.addWidget(self.table)
        split.addWidget(self.plot)
        split.setSizes([300, 400])
        layout = QVBoxLayout(self)
        layout.addWidget(split)
        layout.addWidget(self.notes)
        self.result = None
        self.curves = None
        model.design_changed.connect(self._on_design_changed)
        self._on_design_changed(model.design)

    def _on_design_changed(self, design) -> None:
        try:
            self.result = efficiency(design)
            self.curves = efficiency_curves(design)
        except DesignError as exc:
            self.result = self.curves = None
            self.table.setRowCount(0)
            self.plot.plotItem.clear()
            self.notes.setText(f"No efficiency: {exc}")
            return
        self._fill_table()
        self._fill_plot()
        omitted = self.result.omitted
        self.notes.setText("Not given in [losses], counted as zero: " + "; ".join(omitted) + "." if omitted
                           else "Every loss figure of [losses] is given.")

    def _fill_table(self) -> None:
        eff = self.result
        shown = [f for f in LOSS_FIELDS if np.any(getattr(eff, f) != 0)]
        heads = list(_FIXED) + [LOSS_TITLES[f] + " (W)" for f in shown]
        n = eff.vin.shape[0]
        with QSignalBlocker(self.table):
            self.table.clear()
            self.table.setColumnCount(len(heads))
            self.table.setRowCount(n)
            self.table.setHorizontalHeaderLabels(heads)
            for k in range(n):
                cells = [format_value(eff.vin[k], "V"), format_value(eff.load[k], "A"), eff.mode[k],
                         f"{100 * eff.duty[k]:.1f}", format_value(eff.p_out_w[k], "W"),
                         format_value(eff.p_loss_w[k], "W"), f"{100 * eff.efficiency[k]:.2f}"]
                cells += [format_value(getattr(eff, f)[k]) for f in shown]
                for j, text in enumerate(cells):
                    self.table.setItem(k, j, QTableWidgetItem(text))
            self.table.resizeColumnsToContents()

    def _fill_plot(self) -> None:
        c = self.curves
        self.plot.plotItem.clear()
        cmap = vin_colour_map()
        lo, hi = float(np.min(c.vin)), float(np.max(c.vin))
        for i, v in enumerate(c.vin):
            pos = 0.0 if hi == lo else (float(v) - lo) / (hi - lo)
            pen = pg.mkPen(cmap.map(pos, mode="qcolor"), width=1)
            self.plot.plot(c.load, 100.0 * c.efficiency[i], pen=pen, name=f"vin {format_value(float(v), 'V')}")


def open_efficiency(window) -> EfficiencyDialog:
    """Tools > Efficiency: the dialog for the window's model (shown, not modal)."""
    dialog = EfficiencyDialog(window.model, window)
    dialog.show()
    return dialog
