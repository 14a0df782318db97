"""Open-loop switching transients of the real power-stage circuits in ngspice.

An independent check of loopkit's steady-state operating point: from a
:class:`loopkit.design.Design` (its data only; nothing of loopkit's power-stage
code is called here) and one corner, write the switched circuit of the topology
as an ngspice netlist, drive its switches open-loop with a PULSE source at the
given duty cycle and fsw, find the periodic steady state and measure the
average output voltage, the inductor current's ripple and whether it conducts
continuously.

Circuit elements
----------------
* Switches: ngspice ``SW`` (ideal, ``RON`` = the design's on-resistance,
  ``ROFF`` = 100 Mohm), thresholds at 0.5 V of a 0/1 V PULSE whose edges last
  Ts/10^5, so the on-time is exact to 10^-5 Ts (the switch flips at some
  solver time point inside an edge: with edges of Ts/10^4 that jitter rang the
  LC filter by 2x10^-4 of vout).
* Synchronous rectifier in forced CCM: a ``SW`` with ``RON = r_rectifier``
  driven by the complementary PULSE (no dead time).  Synchronous with diode
  emulation (``light_load = "dcm"``): an ideal diode (below) with series
  ``r_rectifier`` and no drop, which is what diode emulation does.
* Diode: constant drop plus series resistance, exactly the model the design
  file describes (``diode_drop``, ``r_rectifier``): a DC source of
  ``diode_drop`` in series with a piecewise-linear ideal diode, a behavioural
  current source ``I = V / r_rectifier`` for V > 0 and ``G_OFF V`` otherwise
  (an exponential junction with a sharp knee, N = 0.001, failed to converge
  at some flyback corners and adds its own 0.5 mV drop).  No junction
  capacitance and no reverse recovery.  A zero ``r_rectifier`` becomes
  :data:`R_MIN`.
* Inductor with its DCR in series; every output-capacitor bank as C_total in
  series with ESR_total; the load a resistor |vout| / load (the corner's load
  current at the nominal output).
* Flyback: an ideal transformer (a VCVS on the secondary, a CCCS reflecting the
  secondary current onto the primary, n = Np/Ns) with the magnetising
  inductance across its primary.  By default (``flyback_dcr="winding"``) the
  primary DCR sits in series with the primary terminal, i.e. it carries the
  primary current only while the switch conducts, as a real winding does;
  ``flyback_dcr="magnetising"`` puts it in series with Lm instead, so the
  magnetising current flows through it in both intervals.  No leakage
  inductance: with coupling k < 1 the leakage energy 0.5 Llk Ipk^2 per cycle
  is lost in a clamp and lowers the output; neither this model nor an
  averaged model without leakage includes it.
* Four-switch buck-boost: all four switches; buck mode switches Q1/Q2 with Q4
  held on and Q3 off, boost mode holds Q1 on, Q2 off and switches Q3/Q4.

Steady state
------------
The circuit's state at the start of a period is x = (inductor current, voltage
of each capacitor).  Over M whole periods the circuit maps x to Phi(x), affine
in CCM (fixed switching sequence, linear elements) and nearly so in DCM.  The
periodic steady state is the fixed point of Phi, found by Newton's method with
a finite-difference Jacobian (the shooting method of Aprille and Trick, "Steady
state analysis of nonlinear circuits with periodic inputs", Proc. IEEE 60(1),
1972, from memory): n + 1 runs of M periods (in parallel), then runs from the fixed point
until the drift of the period-averaged output over the measurement run is
below ``drift_rel`` (a chord step with the same Jacobian otherwise).  This avoids simulating the thousands of periods a DCM
output pole of a few tens of Hz would need to settle, and it does not start
from loopkit's answer: the initial guess uses the design's target vout and the
ideal relations only.

Measurements use ngspice's own time points (no ``linearize``: the switching
instants are breakpoints, so the current's extremes are sampled exactly, which
a uniform grid would miss); averages are trapezoid integrals over exact whole
periods.  Power bookkeeping: the input power, the output power and the power of the
diode's constant drop are measured, so the resistive losses (switches,
rectifier, DCR, ESR) are their difference.

Source: ngspice (Debian package ``ngspice``, version 39), run as
``ngspice -b`` in a temporary directory.
"""

from __future__ import annotations

import os
import subprocess
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

__all__ = ["EDGE", "G_OFF", "R_MIN", "SwitchingResult", "netlist", "simulate"]

#: Smallest rectifier resistance used (a zero r_rectifier becomes this), ohm.
R_MIN = 1e-4
#: Off-state conductance of the ideal diode, S.
G_OFF = 1e-9
_ROFF = 1e8
EDGE = 1e-5  # PULSE edge time as a fraction of Ts
_STEPS = 100  # maximum time step Ts / _STEPS


@dataclass(frozen=True)
class SwitchingResult:
    """Periodic steady state of one corner, measured over the last ``window`` periods.

    Attributes
    ----------
    vout_v : float
        Average output voltage, V.
    il_avg_a : float
        Average inductor current (flyback: magnetising current, primary), A.
    ripple_pp_a : float
        Peak-to-peak inductor current (per period, averaged over the window), A.
    il_min_a, il_max_a : float
        Extremes of the inductor current, A.
    zero_fraction : float
        Fraction of the period the inductor current stays at zero (below
        1e-3 of its peak in magnitude, at two successive time points).
    dcm : bool
        ``zero_fraction > 0.01``: the current reaches zero and stays there.
    vout_pp_v : float
        Peak-to-peak output-node voltage over the last period, V.
    vcap_pp_v : float
        The largest peak-to-peak voltage of any capacitor (behind its ESR)
        over the last period, V.
    p_in_w, p_out_w, p_drop_w : float
        Input power, load power and the power of the diode's constant drop, W.
    drift_rel : float
        Relative change of the output averaged over the first and the last
        ``window`` periods of the measurement run (0 at a true steady state).
    runs : int
        ngspice runs used; ``elapsed_s`` their total wall time.
    """

    vout_v: float
    il_avg_a: float
    ripple_pp_a: float
    il_min_a: float
    il_max_a: float
    zero_fraction: float
    dcm: bool
    vout_pp_v: float
    vcap_pp_v: float
    p_in_w: float
    p_out_w: float
    p_drop_w: float
    drift_rel: float
    runs: int
    elapsed_s: float
    netlist: str = field(repr=False)

    @property
    def p_resistive_w(self) -> float:
        """Losses in all resistances (switches, rectifier, DCR, ESR), W."""
        return self.p_in_w - self.p_out_w - self.p_drop_w


# --------------------------------------------------------------------- netlist
def _rectifier(name, anode, cathode, stage, gate):
    """Lines for a rectifier from ``anode`` to ``cathode`` (current direction)."""
    rr = max(stage.r_rectifier, 1e-6)
    if stage.rectifier == "synchronous" and _light_load(stage) == "forced-ccm":
        return [
            f"S{name} {anode} {cathode} {gate} 0 SWR{name}",
            f".model SWR{name} SW vt=0.5 vh=0 ron={rr:.9g} roff={_ROFF:g}",
        ]
    drop = 0.0 if stage.rectifier == "synchronous" else stage.diode_drop
    node = f"{name}x" if drop > 0 else anode
    lines = [f"VF{name} {anode} {node} DC {drop:.9g}"] if drop > 0 else []
    vj = f"V({node},{cathode})"
    lines.append(
        f"B{name} {node} {cathode} I = ({vj} > 0 ? {vj} / {max(stage.r_rectifier, R_MIN):.9g} : 0) + {G_OFF:g} * {vj}"
    )
    return lines


def _light_load(stage):
    """The design file's rule: left out means dcm for a diode, forced-ccm for a synchronous rectifier."""
    return stage.light_load or ("forced-ccm" if stage.rectifier == "synchronous" else "dcm")


def _switch(name, a, b, gate, ron):
    return [
        f"S{name} {a} {b} {gate} 0 SW{name}",
        f".model SW{name} SW vt=0.5 vh=0 ron={max(ron, 1e-6):.9g} roff={_ROFF:g}",
    ]


def _inductor(a, b, l_h, dcr, i0):
    """a -> L -> sense -> DCR -> b; the sense source VSL measures the current a -> b."""
    lines = [f"L1 {a} l1 {l_h:.9g} ic={i0:.9g}", "VSL l1 l2 0"]
    lines += [f"RDCR l2 {b} {dcr:.9g}"] if dcr > 0 else ["VSL2 l2 " + b + " 0"]
    return lines


def netlist(design, vin, load, duty, *, mode=None, state0, periods, flyback_dcr="winding"):
    """ngspice netlist of the switched circuit at one corner.

    Parameters
    ----------
    design : loopkit.design.Design
    vin, load : float
        Input voltage (V) and load current (A) of the corner.
    duty : float
        Duty cycle of the controlled switch (of Q1 in buck mode, Q3 in boost mode).
    mode : {"buck", "boost"}, optional
        Four-switch operating mode (required for that topology).
    state0 : sequence of float
        Initial state: inductor current (A) at the start of an on-time, then
        the voltage of each output capacitor bank (V).
    periods : int
        Number of switching periods to simulate.
    flyback_dcr : {"winding", "magnetising"}
        Where the flyback's primary DCR sits (see the module notes).

    Returns
    -------
    str
    """
    st, op = design.stage, design.operating
    ts = 1.0 / st.fsw
    tr = EDGE * ts
    ton = duty * ts
    r_load = abs(op.vout) / load
    i0, vcs = state0[0], state0[1:]
    topo = st.topology
    lines = [
        f"* {topo} open loop, vin={vin:g} V, load={load:g} A, duty={duty:.9g}",
        f"VIN in 0 DC {vin:.9g}",
        f"VG g 0 PULSE(0 1 0 {tr:.6g} {tr:.6g} {ton - tr:.9g} {ts:.9g})",
        f"VGN gn 0 PULSE(1 0 0 {tr:.6g} {tr:.6g} {ton - tr:.9g} {ts:.9g})",
        "VON on 0 DC 1",
        "VOFF off 0 DC 0",
    ]
    if topo == "buck":
        lines += _switch("1", "in", "sw", "g", st.r_switch)
        lines += _rectifier("2", "0", "sw", st, "gn")
        lines += _inductor("sw", "out", st.inductance, st.dcr, i0)
    elif topo == "boost":
        lines += _inductor("in", "sw", st.inductance, st.dcr, i0)
        lines += _switch("1", "sw", "0", "g", st.r_switch)
        lines += _rectifier("2", "sw", "out", st, "gn")
    elif topo == "inverting-buck-boost":
        lines += _switch("1", "in", "sw", "g", st.r_switch)
        lines += _inductor("sw", "0", st.inductance, st.dcr, i0)
        lines += _rectifier("2", "out", "sw", st, "gn")
    elif topo == "four-switch-buck-boost":
        if mode not in ("buck", "boost"):
            raise ValueError(f"four-switch mode = {mode!r}: must be buck or boost")
        if st.rectifier != "synchronous":
            raise ValueError("four-switch with diode rectifiers is not modelled here")
        g1, g2, g3, g4 = ("g", "gn", "off", "on") if mode == "buck" else ("on", "off", "g", "gn")
        lines += _switch("1", "in", "a", g1, st.r_switch)
        lines += _rectifier("2", "0", "a", st, g2) if mode == "buck" else _switch("2", "0", "a", g2, st.r_rectifier)
        lines += _inductor("a", "b", st.inductance, st.dcr, i0)
        lines += _switch("3", "b", "0", g3, st.r_switch)
        lines += (
            _rectifier("4", "b", "out", st, g4) if mode == "boost" else _switch("4", "b", "out", g4, st.r_rectifier)
        )
    elif topo == "flyback":
        n = st.turns_ratio
        if flyback_dcr == "winding":
            lines += [
                f"RDCR in a {st.dcr:.9g}" if st.dcr > 0 else "VDCR in a 0",
                f"L1 a l1 {st.inductance:.9g} ic={i0:.9g}",
                "VSL l1 d 0",
            ]
        elif flyback_dcr == "magnetising":
            lines += ["VDCR in a 0"] + _inductor("a", "d", st.inductance, st.dcr, i0)
        else:
            raise ValueError(f"flyback_dcr = {flyback_dcr!r}: must be winding or magnetising")
        lines += [f"E1 s1 0 d a {1.0 / n:.12g}", "VSS s1 s 0", f"F1 d a VSS {1.0 / n:.12g}"]
        lines += _switch("1", "d", "0", "g", st.r_switch)
        lines += _rectifier("2", "s", "out", st, "gn")
    else:
        raise ValueError(f"topology {topo!r} not modelled")
    for k, bank in enumerate(st.output_caps):
        node = f"c{k}" if bank.esr > 0 else "out"
        if bank.esr > 0:
            lines.append(f"RESR{k} out c{k} {bank.esr_total:.9g}")
        lines.append(f"C{k} {node} 0 {bank.c_total:.9g} ic={vcs[k]:.9g}")
    lines.append(f"RLOAD out 0 {r_load:.9g}")
    cap_nodes = " ".join(f"v({f'c{k}' if b.esr > 0 else 'out'})" for k, b in enumerate(st.output_caps))
    drop = "i(vf2)" if any(line.startswith("VF2 ") for line in lines) else "0 * i(vin)"
    lines += [
        ".options reltol=1e-5 abstol=1e-10 vntol=1e-8 itl4=50",
        f".tran {ts / _STEPS:.6g} {periods * ts:.9g} 0 {ts / _STEPS:.6g} uic",
        ".control",
        "set wr_singlescale",
        "set wr_vecnames",
        "run",
        f"let idrop = {drop}",
        f"wrdata out.txt v(out) i(vsl) i(vin) idrop {cap_nodes}",
        ".endc",
        ".end",
    ]
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------- running
def _run(text, t_stop):
    """Run ngspice on ``text``: dict of arrays; fails unless the run reached ``t_stop``."""
    with tempfile.TemporaryDirectory(prefix="lk_sw_") as tmp:
        with open(os.path.join(tmp, "c.cir"), "w") as fh:
            fh.write(text)
        proc = subprocess.run(
            ["ngspice", "-b", "c.cir"], cwd=tmp, capture_output=True, text=True, timeout=300, check=False
        )
        out = os.path.join(tmp, "out.txt")
        if not os.path.exists(out):
            raise RuntimeError(
                f"ngspice failed (exit {proc.returncode}):\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
            )
        data = np.loadtxt(out, skiprows=1, ndmin=2)
    if data[-1, 0] < t_stop * (1.0 - 1e-9):
        raise RuntimeError(f"ngspice stopped at t = {data[-1, 0]:.6g} s of {t_stop:.6g} s:\n{proc.stdout[-1500:]}")
    return {
        "t": data[:, 0],
        "v": data[:, 1],
        "il": data[:, 2],
        "iin": data[:, 3],
        "idrop": data[:, 4],
        "caps": data[:, 5:].T,
    }


def _end_state(res):
    return np.concatenate([[res["il"][-1]], res["caps"][:, -1]])


def _mean(t, y, t0, t1):
    """Exact trapezoid average of the sampled ``y`` over [t0, t1]."""
    inside = (t > t0) & (t < t1)
    tt = np.concatenate([[t0], t[inside], [t1]])
    yy = np.concatenate([[np.interp(t0, t, y)], y[inside], [np.interp(t1, t, y)]])
    return np.trapezoid(yy, tt) / (t1 - t0)


def _initial_guess(design, vin, load, duty, mode):
    """Independent start: the target vout on the capacitors and the ideal valley current."""
    st, op = design.stage, design.operating
    v, ts, l_h = abs(op.vout), 1.0 / st.fsw, st.inductance
    topo = mode if st.topology == "four-switch-buck-boost" else st.topology
    if topo == "buck":
        i_avg, slope = load, (vin - v) / l_h
    elif topo == "boost":
        i_avg, slope = load * v / vin, vin / l_h
    else:  # the inductor delivers its current to the output during D' (through n for a flyback)
        n = st.turns_ratio if topo == "flyback" else 1.0
        i_avg, slope = load / ((1.0 - duty) * n), vin / l_h
    i0 = max(i_avg - slope * duty * ts / 2.0, 0.0)
    return np.array([i0] + [op.vout] * len(st.output_caps), float)


def simulate(
    design,
    vin,
    load,
    duty,
    *,
    mode=None,
    periods=60,
    window=20,
    drift_rel=2e-5,
    flyback_dcr="winding",
    workers=None,
    max_iter=4,
):
    """Periodic steady state of the switched circuit at one corner, measured.

    Parameters
    ----------
    design : loopkit.design.Design
    vin, load, duty : float
        Corner input voltage (V), load current (A) and the duty cycle to drive.
    mode : {"buck", "boost"}, optional
        Four-switch mode.
    periods : int
        Periods per shooting run (M).
    window : int
        Whole periods measured at the end of the measurement run.
    drift_rel : float
        Accept the steady state once the output averaged over the first and
        the last ``window`` periods of a measurement run differ by less than
        this (relative); at most ``max_iter`` measurement runs.
    flyback_dcr : {"winding", "magnetising"}
    workers : int, optional
        Threads for the parallel Jacobian runs (default: CPU count).

    Returns
    -------
    SwitchingResult
    """
    t_start = time.perf_counter()
    ts = 1.0 / design.stage.fsw
    t_end = periods * ts

    def run(x):
        text = netlist(design, vin, load, duty, mode=mode, state0=x, periods=periods, flyback_dcr=flyback_dcr)
        return text, _run(text, t_end)

    x0 = _initial_guess(design, vin, load, duty, mode)
    deltas = np.array(
        [0.02 * max(abs(x0[0]), vin * duty * ts / design.stage.inductance)]
        + [0.005 * abs(design.operating.vout)] * (x0.size - 1)
    )
    starts = [x0] + [x0 + d * np.eye(x0.size)[j] for j, d in enumerate(deltas)]
    with ThreadPoolExecutor(max_workers=workers or os.cpu_count()) as pool:
        ends = [_end_state(r) for _, r in pool.map(run, starts)]
    runs = len(starts)
    jac = np.column_stack([(ends[j + 1] - ends[0]) / deltas[j] for j in range(x0.size)]) - np.eye(x0.size)
    x = x0 - np.linalg.solve(jac, ends[0] - x0)
    for _ in range(max_iter):
        text, res = run(x)
        runs += 1
        t, v = res["t"], res["v"]
        first = _mean(t, v, 0.0, window * ts)
        last = _mean(t, v, t_end - window * ts, t_end)
        drift = abs(last - first) / abs(last)
        if drift < drift_rel:
            break
        x = x - np.linalg.solve(jac, _end_state(res) - x)  # chord step: same Jacobian
    t0w = t_end - window * ts
    sel = (t >= t0w - 1e-15) & (t <= t_end + 1e-15)
    tw, iw = t[sel], res["il"][sel]
    pp = [np.ptp(iw[(tw >= t0w + k * ts - 1e-15) & (tw <= t0w + (k + 1) * ts + 1e-15)]) for k in range(window)]
    peak = np.max(np.abs(iw))
    zero = (np.abs(iw[:-1]) < 1e-3 * peak) & (np.abs(iw[1:]) < 1e-3 * peak)
    zero_fraction = float(np.sum(np.diff(tw)[zero]) / (window * ts))
    last_period = t >= t_end - ts - 1e-15
    st = design.stage
    drop = 0.0 if st.rectifier == "synchronous" else st.diode_drop
    r_load = abs(design.operating.vout) / load
    return SwitchingResult(
        vout_v=float(last),
        il_avg_a=float(_mean(t, res["il"], t0w, t_end)),
        ripple_pp_a=float(np.mean(pp)),
        il_min_a=float(iw.min()),
        il_max_a=float(iw.max()),
        zero_fraction=zero_fraction,
        dcm=zero_fraction > 0.01,
        vout_pp_v=float(np.ptp(v[last_period])),
        vcap_pp_v=float(max(np.ptp(c[last_period]) for c in res["caps"])),
        p_in_w=float(-vin * _mean(t, res["iin"], t0w, t_end)),
        p_out_w=float(_mean(t, v**2, t0w, t_end) / r_load),
        p_drop_w=float(drop * _mean(t, res["idrop"], t0w, t_end)),
        drift_rel=float(drift),
        runs=runs,
        elapsed_s=time.perf_counter() - t_start,
        netlist=text,
    )
