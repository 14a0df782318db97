"""The verdict: does the loop meet its targets at every corner, and can the model say so?

A loop *meets its targets* when every corner is stable, has one gain crossover,
a phase margin at or above the target, a gain margin (read below half the
switching frequency) at or above the target, and, for corners in continuous
conduction, a crossover within the band ``fc / fc_band`` .. ``fc * fc_band``
around the target.  Light-load DCM corners cross over far lower by nature (the
plant's gain falls with the load), so only their stability and margins are
judged.  Each miss is a :class:`~loopkit.errors.Finding` of severity
``"error"`` that names the corner and what to change; ``loopkit design`` exits
1 when there is any (see README, "Exit status").

Where the model itself stops holding the verdict says so as an error as well: a
crossover target above a fifth of the switching frequency (the averaged model
and the modulator's sampling make the predicted margins optimistic there;
common practice, no source for the exact fraction).
"""

from __future__ import annotations

import numpy as np

from .errors import Finding
from .margins import Margins
from .networks import network_module
from .units import format_value

__all__ = ["FC_FSW_LIMIT", "SHOWN_TOLERANCE", "model_findings", "verdict_findings"]

#: Above fsw times this the predicted margins are not trustworthy (common practice, no source).
FC_FSW_LIMIT = 0.2


#: A margin counts as met when it is within this of its target (deg or dB): the tables show one decimal.
SHOWN_TOLERANCE = 0.05

def _where(stage, k: int) -> str:
    return f"{format_value(stage.vin[k], 'V')} {format_value(stage.load[k], 'A')}"


def _pm_advice(stage, k: int, targets, fsw: float) -> str:
    if stage.dcm[k]:
        return ("this light-load corner runs in DCM, where the plant's gain and phase differ from CCM:"
                " keep the load above the DCM boundary, or lower fc so one network suits both modes")
    rhp = stage.f_rhp_hz[k]
    if np.isfinite(rhp) and targets.fc_hz > rhp / 5:
        return f"lower fc well below the RHP zero ({format_value(rhp, 'Hz')} here)"
    if network_module(targets.network).ZEROS < 2:
        return "use Type III (two zeros), or lower fc"
    return "lower fc, or add output capacitance or an ESR zero"


def verdict_findings(m: Margins, stage, targets, fsw: float) -> list[Finding]:
    """Error findings for every corner that misses a target (empty when the loop meets them all).

    Parameters
    ----------
    m : Margins
        Margins of the loop with the parts to build.
    stage : StageResult
    targets : Targets
        ``pm_deg``, ``gm_db``, ``fc_hz``, ``fc_band``, ``network``.
    fsw : float
        Switching frequency, Hz.
    """
    out = []
    lo, hi = targets.fc_hz / targets.fc_band, targets.fc_hz * targets.fc_band
    for k in range(stage.n_corners):
        where = _where(stage, k)
        if not m.stable[k]:
            out.append(Finding("unstable", f"{where}: the closed loop is UNSTABLE (a root of 1 + T lies in the right"
                               f" half plane): {_pm_advice(stage, k, targets, fsw)}", k, "error"))
            continue
        if m.n_crossovers[k] == 0:
            out.append(Finding("no-crossover", f"{where}: the loop gain never crosses 0 dB between"
                               f" {format_value(0.1, 'Hz')} and fsw; the network's gain is far too low or high", k,
                               "error"))
            continue
        if m.n_crossovers[k] > 1:
            shown = ", ".join(format_value(x, "Hz") for x in m.crossovers_hz[k])
            out.append(Finding("multiple-crossovers", f"{where}: the loop gain crosses 0 dB {m.n_crossovers[k]}"
                               f" times ({shown}): {_pm_advice(stage, k, targets, fsw)}", k, "error"))
        if m.pm_deg[k] < targets.pm_deg - SHOWN_TOLERANCE:
            out.append(Finding("pm-below-target", f"{where}: phase margin {m.pm_deg[k]:.1f} deg is below the target"
                               f" {targets.pm_deg:g} deg: {_pm_advice(stage, k, targets, fsw)}", k, "error"))
        if np.isfinite(m.gm_db[k]) and m.gm_db[k] < targets.gm_db - SHOWN_TOLERANCE:
            out.append(Finding("gm-below-target", f"{where}: gain margin {m.gm_db[k]:.1f} dB (at"
                               f" {format_value(m.f180_hz[k], 'Hz')}) is below the target {targets.gm_db:g} dB:"
                               " lower fc, or place the network's high-frequency poles lower", k, "error"))
        if not stage.dcm[k] and not (lo <= m.fc_hz[k] <= hi):
            side = "below" if m.fc_hz[k] < lo else "above"
            out.append(Finding("fc-outside-band", f"{where}: crossover {format_value(m.fc_hz[k], 'Hz')} is {side} the"
                               f" band {format_value(lo, 'Hz')} to {format_value(hi, 'Hz')} around the target"
                               f" (fc_band {targets.fc_band:g}): the loop gain changes that much across the corners;"
                               " input-voltage feed-forward ([modulator] feedforward) or a wider fc_band if that"
                               " is acceptable", k, "error"))
    return out


def model_findings(fc_hz: float, fsw: float) -> list[Finding]:
    """Error findings where the averaged model cannot give trustworthy margins for this target."""
    if fc_hz <= FC_FSW_LIMIT * fsw:
        return []
    return [Finding("fc-fsw", f"crossover target {format_value(fc_hz, 'Hz')} is above fsw/5"
                    f" ({format_value(FC_FSW_LIMIT * fsw, 'Hz')}): there the averaged model and the modulator's"
                    " sampling make the predicted margins optimistic, so they are not trustworthy; lower fc to"
                    " fsw/5 or below (fsw/10 is usual)", None, "error")]
