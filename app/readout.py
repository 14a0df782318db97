"""The margins read-out above the plot: the worst corner's fc, PM and GM, coloured against the targets."""

from __future__ import annotations

import html
import math

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel, QWidget

from loopkit import format_value
from loopkit.margins import gm_state
from loopkit.powerstage import corner_label

from .corners_view import GM_BEYOND_TIP, below_target, fc_text, gm_text, pm_text
from .forms import NETWORK_NAMES

__all__ = ["MarginsReadout", "infeasible_reason"]

_OK, _LOW, _BAD, _GREY = "#0a7d32", "#b36b00", "#b02a00", "#555"
#: The gain-margin level the read-out and the table hold every corner to: loopkit's own warning level.
_REASON_CHARS = 110


def infeasible_reason(result) -> str:
    """The library's text of why the targets cannot be met (its ``infeasible`` finding), without a
    leading "no parts:" that the app's own heading already says."""
    text = next((f.message for f in result.findings if f.code == "infeasible"), "")
    if text.lower().startswith("no parts:"):
        text = text[len("no parts:"):].strip()
    return text or "no parts for these targets"


class MarginsReadout(QWidget):
    """One line: worst corner, its crossover, phase and gain margin; then the targets.

    PM is green at or above the user's PM target, amber below it and red when
    a corner is unstable or PM <= 0; GM is green at or above
    the gain-margin target (``compensator.gm_db``), amber below, red at or below 0 dB and grey (with a
    tooltip) where the averaged model cannot tell it (beyond fsw/2).
    """

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self.worst = QLabel(self)
        self.worst.setObjectName("readout_worst")
        self.worst.setStyleSheet("font-size: 11pt;")
        self.worst.setTextFormat(Qt.RichText)
        self.targets = QLabel(self)
        self.targets.setObjectName("readout_targets")
        self.targets.setTextFormat(Qt.RichText)
        # two lines placed by hand, no layout: a new text on every slider move never re-lays out the window
        # (a layout would pass each label's size-hint change up to the main window, which then repaints whole)
        self._line1 = self.worst.fontMetrics().height() + 6
        self._line2 = self.targets.fontMetrics().height() + 2
        self.setFixedHeight(self._line1 + self._line2 + 4)
        model.results_changed.connect(self._on_results_changed)
        self._on_results_changed(model.result)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        w = max(self.width() - 16, 10)
        self.worst.setGeometry(8, 2, w, self._line1)
        self.targets.setGeometry(8, 2 + self._line1, w, self._line2)

    def _on_results_changed(self, result) -> None:
        if result is None:
            return
        t = self._model.targets  # what the user set (with given parts the session may hold older ones)
        source = "given parts" if self._model.parts_given else (
            f"{t.resistor_series}/{t.capacitor_series} parts")
        network = NETWORK_NAMES.get(result.network, result.network) + ", "
        if result.design.control.scheme == "digital":  # a digital controller: its form and fs, no network or parts
            d, network = result.design.digital, ""
            fs = f", fs {format_value(result.digital.fs_hz, 'Hz')}" if result.digital is not None else ""
            source = f"digital {d.form}, {d.method}{fs}"
        targets = (f"<span style='color:#555'>Targets: {network}"
                   f"fc {format_value(t.fc_hz, 'Hz')}, PM ≥ {t.pm_deg:g}°, GM ≥ {t.gm_db:g} dB · "
                   f"{source}</span>")
        if not result.feasible:
            reason = infeasible_reason(result)
            short = reason if len(reason) <= _REASON_CHARS else reason[:_REASON_CHARS - 1].rstrip() + "…"
            self.worst.setText(f"<b style='color:{_BAD}'>No parts for these targets:</b> {html.escape(short)}")
            self.worst.setToolTip(reason)
            self.targets.setText(targets + " · the plot keeps the plant and the last feasible loop")
            return
        m, w, st = result.margins, result.worst_corner, result.stage
        pm, gm, fc = float(m.pm_deg[w]), float(m.gm_db[w]), float(m.fc_hz[w])
        states = gm_state(m)
        state = str(states[w])
        stable_all = bool(m.stable.all())
        pm_colour = (_BAD if (not math.isfinite(pm) or pm <= 0 or not stable_all)
                     else _LOW if below_target(pm, t.pm_deg) else _OK)
        if state == "beyond-model":
            gm_colour = _GREY
        elif state == "none":
            gm_colour = _OK
        else:
            gm_colour = _BAD if gm <= 0 else _LOW if below_target(gm, t.gm_db) else _OK
        if stable_all:
            verdict = "all corners stable"
        else:
            verdict = f"<b style='color:{_BAD}'>UNSTABLE at {int((~m.stable).sum())} corner(s)</b>"
        pm_low = sum(below_target(float(v), t.pm_deg) for v in m.pm_deg)
        gm_low = sum(s == "number" and below_target(float(v), t.gm_db) for s, v in zip(states, m.gm_db))
        misses = [f"{n} corner{'s' if n > 1 else ''} below the {what} target"
                  for n, what in ((pm_low, "PM"), (gm_low, "GM")) if n]
        if misses:
            targets += f" · <span style='color:{_LOW}'>{'; '.join(misses)}</span>"
        self.targets.setText(targets)
        self.worst.setText(
            f"Worst corner <b>{corner_label(st.vin[w], st.load[w])}</b> ({st.mode[w]}) &nbsp; "
            f"fc <b>{fc_text(fc)}</b> &nbsp; PM <b style='color:{pm_colour}'>{pm_text(pm)}</b> &nbsp; "
            f"GM <b style='color:{gm_colour}'>{gm_text(gm, state)}</b> &nbsp; "
            f"<span style='color:#555'>· {verdict}</span>")
        self.worst.setToolTip(f"GM {gm_text(gm, state)}: {GM_BEYOND_TIP}" if state == "beyond-model" else "")
