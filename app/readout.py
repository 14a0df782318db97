"""The margins read-out above the plot: the worst corner's fc, PM and GM in numbers."""

from __future__ import annotations

import math

from PySide6.QtWidgets import QHBoxLayout, QLabel, QWidget

from loopkit import format_value
from loopkit.loop import GM_WARN_DB, PM_WARN_DEG
from loopkit.powerstage import corner_label

from .corners_view import fc_text, gm_text, pm_text
from .forms import NETWORK_NAMES

__all__ = ["MarginsReadout"]

_OK, _LOW, _BAD = "#0a7d32", "#b36b00", "#b02a00"


class MarginsReadout(QWidget):
    """One line: worst corner, its crossover, phase and gain margin; then the targets."""

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        layout = QHBoxLayout(self)
        layout.setContentsMargins(8, 4, 8, 4)
        self.worst = QLabel()
        self.worst.setObjectName("readout_worst")
        self.targets = QLabel()
        self.targets.setObjectName("readout_targets")
        layout.addWidget(self.worst, 1)
        layout.addWidget(self.targets)
        self.setStyleSheet("QLabel { font-size: 11pt; }")
        model.results_changed.connect(self._on_results_changed)
        self._on_results_changed(model.result)

    def _on_results_changed(self, result) -> None:
        if result is None:
            return
        t = result.targets
        source = "given parts" if self._model.parts_given else (
            f"{t.resistor_series}/{t.capacitor_series} parts")
        self.targets.setText(f"<span style='color:#555'>{NETWORK_NAMES.get(result.network, result.network)} · "
                             f"target fc {format_value(t.fc_hz, 'Hz')}, PM {t.pm_deg:g}° · {source}</span>")
        if not result.feasible:
            self.worst.setText(f"<b style='color:{_BAD}'>No parts for these targets</b> — see the warnings")
            return
        m, w, st = result.margins, result.worst_corner, result.stage
        pm, gm, fc = float(m.pm_deg[w]), float(m.gm_db[w]), float(m.fc_hz[w])
        stable_all = bool(m.stable.all())
        # the thresholds are loopkit's own warning limits
        pm_colour = _BAD if (not math.isfinite(pm) or pm <= 0 or not stable_all) else _LOW if pm < PM_WARN_DEG else _OK
        gm_colour = _BAD if gm <= 0 else _LOW if gm < GM_WARN_DB else _OK
        state = "all corners stable" if stable_all else f"<b style='color:{_BAD}'>UNSTABLE at " \
            f"{int((~m.stable).sum())} corner(s)</b>"
        self.worst.setText(
            f"Worst corner <b>{corner_label(st.vin[w], st.load[w])}</b> ({st.mode[w]}) &nbsp; "
            f"fc <b>{fc_text(fc)}</b> &nbsp; PM <b style='color:{pm_colour}'>{pm_text(pm)}</b> &nbsp; "
            f"GM <b style='color:{gm_colour}'>{gm_text(gm)}</b> &nbsp; <span style='color:#555'>· {state}</span>")
