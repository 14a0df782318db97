"""A bench measurement over the predicted curve of one corner, with the difference and the margins.

Everything drawn comes from :func:`loopkit.measured_overlay.measured_overlay` (the prediction,
the difference, the measured fc, PM and GM); this window only draws it and follows the design:
when the loop changes, the overlay is made again for the chosen corner.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QComboBox, QDialog, QHBoxLayout, QLabel, QVBoxLayout

from loopkit import DesignError
from loopkit.measured_overlay import KIND_TITLES, measured_overlay

from .plots import FrequencyAxis

__all__ = ["MeasuredWindow"]

_PRED = "#1f2a33"
_MEAS = "#b04a00"
_DIFF_DEG = "#3b6e8f"


class MeasuredWindow(QDialog):
    """A measurement (:class:`loopkit.measured.Measurement`) laid over the prediction of a chosen corner.

    Parameters
    ----------
    model : DesignModel
        The view-model; its results give the prediction.
    measurement : Measurement
    corner : int, optional
        The corner measured (default the design corner).
    """

    def __init__(self, model, measurement, corner: int | None = None, parent=None):
        super().__init__(parent)
        self.setObjectName("measured_window")
        self._model = model
        self.measurement = measurement
        self.overlay = None
        name = measurement.source.rsplit("/", 1)[-1] if measurement.source else "measurement"
        self.setWindowTitle(f"Measured {KIND_TITLES[measurement.kind]}: {name}")
        self.resize(900, 760)
        layout = QVBoxLayout(self)
        row = QHBoxLayout()
        row.addWidget(QLabel("Measured at corner:"))
        self.corner_box = QComboBox()
        self.corner_box.setObjectName("measured_corner")
        row.addWidget(self.corner_box, 1)
        layout.addLayout(row)
        self.summary = QLabel()
        self.summary.setObjectName("measured_summary")
        self.summary.setWordWrap(True)
        self.summary.setTextInteractionFlags(Qt.TextSelectableByMouse)
        layout.addWidget(self.summary)
        self.canvas = pg.GraphicsLayoutWidget()
        self.canvas.setBackground("w")
        layout.addWidget(self.canvas, 1)
        self.mag = self.canvas.addPlot(row=0, col=0, axisItems={"bottom": FrequencyAxis("bottom")})
        self.phase = self.canvas.addPlot(row=1, col=0, axisItems={"bottom": FrequencyAxis("bottom")})
        self.diff = self.canvas.addPlot(row=2, col=0, axisItems={"bottom": FrequencyAxis("bottom")})
        for plot, label in ((self.mag, "Gain (dB)"), (self.phase, "Phase (°)"), (self.diff, "Difference")):
            plot.setLogMode(x=True)
            plot.showGrid(x=True, y=True, alpha=0.25)
            plot.setMenuEnabled(False)
            plot.getAxis("left").setWidth(62)
            plot.getAxis("left").setLabel(label)
            if plot is not self.mag:
                plot.setXLink(self.mag)
        self.diff.getAxis("bottom").setLabel("Frequency (Hz)")
        self.mag.addLegend(offset=(8, 8))
        self.diff.addLegend(offset=(8, 8))
        self.pred_mag = self.mag.plot(pen=pg.mkPen(_PRED, width=1.5), name="predicted")
        self.meas_mag = self.mag.plot(pen=None, symbol="o", symbolSize=5, symbolBrush=_MEAS, symbolPen=None,
                                      name="measured")
        self.pred_phase = self.phase.plot(pen=pg.mkPen(_PRED, width=1.5))
        self.meas_phase = self.phase.plot(pen=None, symbol="o", symbolSize=5, symbolBrush=_MEAS, symbolPen=None)
        self.diff_db = self.diff.plot(pen=pg.mkPen(_MEAS, width=1.5), name="gain (dB)")
        self.diff_deg = self.diff.plot(pen=pg.mkPen(_DIFF_DEG, width=1.5, style=Qt.DashLine), name="phase (°)")
        for plot in (self.mag, self.phase, self.diff):
            plot.addItem(pg.InfiniteLine(pos=0.0 if plot is not self.phase else -180.0, angle=0,
                                         pen=pg.mkPen("#888", width=1)), ignoreBounds=True)
        self._fill_corners(corner)
        self.corner_box.currentIndexChanged.connect(self._on_corner_changed)
        model.results_changed.connect(self._on_results_changed)
        self.refresh()

    # ------------------------------------------------------------------ data
    def _fill_corners(self, corner: int | None) -> None:
        result = self._model.result
        self.corner_box.blockSignals(True)
        self.corner_box.clear()
        for k, label in enumerate(result.corner_labels):
            self.corner_box.addItem(f"#{k}  {label}")
        default = max(result.design_corner, 0) if corner is None else corner
        self.corner_box.setCurrentIndex(min(default, result.stage.n_corners - 1))
        self.corner_box.blockSignals(False)

    @property
    def corner(self) -> int:
        return self.corner_box.currentIndex()

    def set_corner(self, corner: int) -> None:
        self.corner_box.setCurrentIndex(corner)

    def refresh(self) -> None:
        """Make the overlay again from the model's current result and draw it."""
        try:
            self.overlay = measured_overlay(self._model.result, self.measurement, self.corner)
        except DesignError as exc:
            self.overlay = None
            self.summary.setText(f"No prediction to compare with: {exc}")
            for item in (self.pred_mag, self.meas_mag, self.pred_phase, self.meas_phase, self.diff_db, self.diff_deg):
                item.setData([], [])
            return
        ov = self.overlay
        self.pred_mag.setData(ov.f_pred_hz, ov.pred_mag_db)
        self.meas_mag.setData(ov.f_hz, ov.meas_mag_db)
        self.pred_phase.setData(ov.f_pred_hz, ov.pred_phase_deg)
        self.meas_phase.setData(ov.f_hz, ov.meas_phase_deg)
        self.diff_db.setData(ov.f_hz, ov.diff_db)
        self.diff_deg.setData(ov.f_hz, ov.diff_deg)
        self.summary.setText("\n".join(ov.summary_lines()))
        lo, hi = np.log10(ov.f_pred_hz[0]), np.log10(ov.f_pred_hz[-1])
        self.mag.setXRange(lo, hi, padding=0.02)

    # ------------------------------------------------------------------ model
    def _on_corner_changed(self, _index: int) -> None:
        self.refresh()

    def _on_results_changed(self, result) -> None:
        if self.corner_box.count() != result.stage.n_corners:
            self._fill_corners(None)
        self.refresh()

    def done(self, code: int) -> None:  # closed: stop following the model
        try:
            self._model.results_changed.disconnect(self._on_results_changed)
        except (RuntimeError, TypeError):
            pass
        super().done(code)
