"""The switching check: one corner simulated cycle by cycle, off the UI thread, over the averaged model.

Every number comes from :mod:`loopkit.switching` (steady state, loop gain by injection, load
step) and from the loop result the app shows (the averaged Bode on its grid, the averaged
step); this module only draws them and runs the work in a QThread with progress and cancel.
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
from loopkit import switching as sw

from .background import BackgroundDialog, BackgroundWorker
from .freq import hz_to_view
from .plots import magnitude_db

__all__ = ["SwitchingDialog", "SwitchingWorker"]


class SwitchingWorker(BackgroundWorker):
    """Steady state, loop gain at fc/4 .. fsw/3 and a load step of half the corner's load, for one corner."""

    WHAT = "simulate this corner"

    def __init__(self, result, corner: int):
        super().__init__()
        self._result, self._corner = result, corner

    def _stage(self, lo: int, hi: int):
        def progress(done, total):
            self.progress.emit(int(lo + (hi - lo) * done / max(total, 1)))
            return not self.cancelled()

        return progress

    def compute(self):
        r, k = self._result, self._corner
        try:
            setup = sw.closed_loop_setup(r)
            steady = sw.steady_state(setup, [k], progress=self._stage(0, 10))
            fsw = r.design.stage.fsw
            fc = float(r.margins.fc_hz[k]) if np.isfinite(r.margins.fc_hz[k]) else fsw / 20
            f = np.unique(np.clip([fc / 4, fc / 2, fc, 2 * fc, fsw / 10, fsw / 5, fsw / 3], fsw / 400, 0.45 * fsw))
            gain = sw.loop_gain(setup, f, corners=[k], progress=self._stage(10, 70))
            step = sw.load_step(setup, 0.5 * float(r.stage.load[k]), corners=[k], progress=self._stage(70, 100))
        except sw.Cancelled:
            return None
        self.progress.emit(100)
        return {"steady": steady, "loop_gain": gain, "step": step, "corner": k}


class SwitchingDialog(BackgroundDialog):
    """Loop gain measured by injection over the averaged Bode, and a load step over the averaged one."""

    VERB = "simulate"
    STOPPED = "Simulation stopped"

    def __init__(self, model, parent=None):
        super().__init__(model, parent)
        self.setWindowTitle("Switching check")
        self.resize(960, 700)
        layout = QVBoxLayout(self)
        row = QHBoxLayout()
        row.addWidget(QLabel("Corner"))
        self.corner = QSpinBox()
        result = model.result
        n = result.stage.n_corners if result is not None else 1
        self.corner.setRange(0, max(n - 1, 0))
        if result is not None:
            self.corner.setValue(int(result.design_corner))
        row.addWidget(self.corner)
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
        self.status = QLabel("Simulates the corner cycle by cycle with the parts shown now and compares with the"
                             " averaged model.")
        self.status.setWordWrap(True)
        layout.addWidget(self.status)
        self.canvas = pg.GraphicsLayoutWidget()
        self.mag_plot = self.canvas.addPlot(row=0, col=0)
        self.phase_plot = self.canvas.addPlot(row=1, col=0)
        self.step_plot = self.canvas.addPlot(row=2, col=0)
        self.phase_plot.setXLink(self.mag_plot)
        for p in (self.mag_plot, self.phase_plot):
            p.setLogMode(x=True)
            p.getAxis("bottom").enableAutoSIPrefix(False)
        self.mag_plot.getAxis("left").setLabel("|T| (dB)")
        self.phase_plot.getAxis("left").setLabel("T phase (°)")
        self.phase_plot.getAxis("bottom").setLabel("Frequency (Hz)")
        self.step_plot.getAxis("left").setLabel("Output deviation", units="V")
        self.step_plot.getAxis("bottom").setLabel("Time", units="s")
        for p in (self.mag_plot, self.phase_plot, self.step_plot):
            p.showGrid(x=True, y=True, alpha=0.2)
            p.getAxis("left").setWidth(70)
        self.legend = self.step_plot.addLegend(offset=(-8, 8), labelTextSize="8pt")
        layout.addWidget(self.canvas, 1)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)

    def make_worker(self, result) -> SwitchingWorker:
        return SwitchingWorker(result, self.corner.value())

    def show_results(self, data: dict) -> None:
        result, k = self._model.result, data["corner"]
        lg, step, ss = data["loop_gain"], data["step"], data["steady"]
        for p in (self.mag_plot, self.phase_plot, self.step_plot):
            p.clear()
        self.legend.clear()
        avg_pen = pg.mkPen((90, 90, 90), width=1)
        sw_brush = pg.mkBrush(200, 60, 20)
        self.mag_plot.plot(result.f_hz, magnitude_db(result.loop_resp[k]), pen=avg_pen)
        self.phase_plot.plot(result.f_hz, result.loop_phase_deg[k], pen=avg_pen)
        # the measured phase on the averaged curve's branch (the same angle, whole turns apart)
        avg_phase = np.interp(np.log10(lg.f_hz), np.log10(result.f_hz), result.loop_phase_deg[k])
        sw_phase = avg_phase + lg.diff_deg[0]
        self.mag_plot.plot(lg.f_hz, magnitude_db(lg.t_switching[0]), pen=None, symbol="o", symbolBrush=sw_brush,
                           symbolSize=7)
        self.phase_plot.plot(lg.f_hz, sw_phase, pen=None, symbol="o", symbolBrush=sw_brush, symbolSize=7)
        limit = lg.limit_hz[0]
        if np.isfinite(limit):
            for p in (self.mag_plot, self.phase_plot):
                p.addItem(pg.InfiniteLine(pos=hz_to_view(limit), angle=90, pen=pg.mkPen((200, 60, 20), style=2)),
                          ignoreBounds=True)
        avg = step.averaged
        model = "sampled model" if ss.limit_cycle is not None else "averaged model"  # a digital loop's is T(z)
        self.step_plot.plot(step.t_s, step.vo_v[0], pen=pg.mkPen((230, 200, 185, 120), width=1), name="switching")
        self.step_plot.plot(step.t_s, step.vo_avg_v[0], pen=pg.mkPen((200, 60, 20), width=1),
                            name="switching, one-period mean")
        self.step_plot.plot(avg.t_s, avg.v[k], pen=avg_pen, name=model)
        self.step_plot.setXRange(0.0, float(step.t_s[-1]), padding=0.02)
        where = (f"the {model} departs by more than 1 dB or 5° from {format_value(limit, 'Hz')}"
                 if np.isfinite(limit) else f"the {model} holds within 1 dB and 5° at every frequency measured")
        lc = ss.limit_cycle
        if lc is not None:  # a digital loop as built: does it settle?
            lsb = format_value(float(result.digital.adc_lsb_out_v[k]), "V")
            where += (f"; it settles on one PWM value, anywhere within one ADC code ({lsb} at the output), so the"
                      " step's mean need not return to its start" if not lc.hunting[0] else
                      f"; it hunts (a limit cycle): the PWM value spans {lc.u_span[0]:.0f} steps, the output"
                      f" {format_value(lc.vo_span_v[0], 'V')}")
        self.status.setText(
            f"Corner {k}: output {format_value(ss.vout_v[0], 'V', 5)}, ripple {format_value(ss.ripple_pp_v[0], 'V')},"
            f" peak current {format_value(ss.il_peak_a[0], 'A')} ({'DCM' if ss.dcm[0] else 'CCM'}); {where}; load"
            f" step {format_value(step.amplitude_a, 'A')}: peak {format_value(step.peak_v[0], 'V')} switching,"
            f" {format_value(avg.peak_v[k], 'V')} {model}.")
