"""Findings about a loop: what the CLI and the app list under "warnings and notes".

Every finding that says something is wrong also says what to change.  The
verdict itself (targets missed at a corner) is :mod:`loopkit.verdict`.
"""

from __future__ import annotations

import numpy as np

from .errors import Finding
from .margins import Margins
from .networks import network_module
from .powerstage import StageResult, corner_label
from .units import format_value
from .verdict import model_findings, verdict_findings

__all__ = ["loop_findings", "opamp_findings", "target_findings", "unique", "why_not_single_crossover",
           "worst_corner"]


def target_findings(stage: StageResult, fsw: float, targets) -> list[Finding]:
    """Findings about the targets themselves: the model's limit, the RHP zero, Type II below the double pole."""
    rhp_min = np.nanmin(stage.f_rhp_hz) if np.any(np.isfinite(stage.f_rhp_hz)) else np.nan
    out = []
    fc = targets.fc_hz
    st = stage
    out.extend(model_findings(fc, fsw))
    if np.isfinite(rhp_min) and fc > rhp_min / 3:
        k = int(np.nanargmin(st.f_rhp_hz))
        out.append(Finding("rhp-zero", f"crossover {format_value(fc, 'Hz')} is above one third of the RHP zero"
                           f" ({format_value(rhp_min, 'Hz')} at {corner_label(st.vin[k], st.load[k])};"
                           " common practice): lower fc or raise the RHP zero (less inductance)", k))
    if network_module(targets.network).ZEROS == 1:
        f0 = st.f0_hz
        no_esr = ~np.any(st.f_esr_hz < fc, axis=1)
        below = np.isfinite(f0) & (fc < f0) & no_esr
        if np.any(below):
            k = int(np.nonzero(below)[0][0])
            out.append(Finding("type2-below-f0", f"crossover {format_value(fc, 'Hz')} is below the double pole"
                               f" ({format_value(f0[k], 'Hz')} at {corner_label(st.vin[k], st.load[k])}) and no ESR"
                               " zero lies below fc: the LC resonance can cross 0 dB again; use Type III with"
                               " fc above the double pole, or more damping", k))
    return out

def loop_findings(m: Margins, stage: StageResult, fsw: float, targets) -> list[Finding]:
    """The verdict (:mod:`loopkit.verdict`) and the notes about each corner's loop."""
    st = stage
    out = verdict_findings(m, st, targets, fsw)
    for k in range(st.n_corners):
        where = corner_label(st.vin[k], st.load[k])
        if m.conditional[k]:
            out.append(Finding("conditional", f"{where}: conditionally stable: a gain drop of"
                               f" {m.gm_low_db[k]:.1f} dB (an error amplifier recovering from saturation, a"
                               " soft start) makes the loop unstable; raise the phase below the crossover (zeros"
                               " nearer the double pole) or lower fc", k))
        if m.beyond_grid[k]:
            out.append(Finding("gain-at-fsw", f"{where}: |T| is still above 0 dB at the switching frequency", k))
        if m.gm_beyond_model[k]:
            out.append(Finding("gm-beyond-model", f"{where}: the phase reaches -180 deg only at"
                               f" {format_value(m.f180_beyond_hz[k], 'Hz')}, above fsw/2, where the averaged model"
                               " does not predict it: no gain margin is given; measure it", k, "note"))
    return out

#: The amplifier's shortfall matters at a corner when it starts below this multiple of the corner's
#: crossover: the loop's phase there is set within a decade or so of fc (common practice, no source).
OPAMP_REACH = 10.0


def opamp_findings(module, parts: dict, ctx, f_hz: np.ndarray, m: Margins | None = None,
                   stage: StageResult | None = None) -> list[Finding]:
    """Where the network needs more gain than the amplifier has: at every corner whose crossover lies
    within :data:`OPAMP_REACH` of where the shortfall starts (else once, as a note for the design)."""
    check = getattr(module, "gain_shortfall", None)
    if check is None or ctx.opamp.ideal:
        return []
    short = check(parts, ctx, f_hz)
    if short is None:
        return []
    text = (f"the network needs more gain than the op-amp has above {format_value(short, 'Hz')}, so the"
            " loop there is not the designed one: choose an op-amp with more gain-bandwidth, or lower fc")
    if m is None or stage is None:
        return [Finding("opamp-gain", text, None)]
    near = np.nonzero(np.isfinite(m.fc_hz) & (short < OPAMP_REACH * m.fc_hz))[0]
    if near.size == 0:
        return [Finding("opamp-gain", text.replace(", so the loop there is not the designed one", "")
                        + " (well above every crossover: little effect)", None, "note")]
    return [Finding("opamp-gain", f"{corner_label(stage.vin[k], stage.load[k])}: {text}", int(k)) for k in near]




def why_not_single_crossover(stage: StageResult, corner: int, m: Margins, row: int, network: str,
                              fc_hz: float) -> str:
    crossings = ", ".join(format_value(x, "Hz") for x in m.crossovers_hz[row])
    where = corner_label(stage.vin[corner], stage.load[corner])
    text = (f"the network puts a crossover at the target, but at {where} the loop gain crosses 0 dB"
            f" {m.n_crossovers[row]} times ({crossings})")
    if not m.stable[row]:
        text += " and the closed loop is unstable"
    f0 = stage.f0_hz[corner]
    if np.isfinite(f0):
        text += f"; the double pole at {format_value(f0, 'Hz')} (Q {stage.q[corner]:.1f}) peaks above 0 dB"
        if network_module(network).ZEROS < 2:
            text += ": use Type III with fc above the double pole, or lower fc well below it"
        elif fc_hz > f0:
            text += ": move the zeros nearer the double pole (method auto or placement), or raise fc further above it"
        else:
            text += ": raise fc above the double pole, or lower it well below"
    return text


def worst_corner(m: Margins) -> int:
    """Lowest phase margin; an unstable corner or one without crossover is worse still."""
    score = np.where(np.isfinite(m.pm_deg), m.pm_deg, -1e3)
    score = np.where(m.stable, score, -1e6 + np.nan_to_num(m.pm_deg, nan=0.0))
    return int(np.argmin(score))


def unique(findings: list) -> list:
    seen, out = set(), []
    for f in findings:
        key = (f.code, f.message, f.corner)
        if key not in seen:
            seen.add(key)
            out.append(f)
    return out
