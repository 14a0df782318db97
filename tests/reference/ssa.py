"""Independent state-space-averaged reference model of the PWM power stages.

Written from the switched circuits, following R. D. Middlebrook and S. Cuk, "A
general unified approach to modelling switching-converter power stages", IEEE
PESC 1976 (state-space averaging), and nothing from ``loopkit.stages`` or
``loopkit.powerstage`` is imported or called.  Only the plain design data
(``loopkit.design.Stage`` fields) is read, in :func:`params_from_stage`.

Method ([MC], sections 2-3)
---------------------------
In each switching interval k (k = 1: controlled switch on for D Ts; k = 2: the
rectifier conducts for D' Ts) the circuit is linear::

    dx/dt = A_k x + B_k u,        y = C_k x + E_k u

with states x = [inductor current, the capacitor voltage of every output bank
that has ESR, (the common voltage of the banks with zero ESR)], inputs
u = [vg, VD, i_inj] (VD: the diode forward drop as a constant source; i_inj: a
test current injected into the output node, for Zout) and output y = the output
node voltage (across the load).  Averaging gives A = D A1 + D' A2 (likewise B,
C, E); the dc point solves 0 = A X + B U, Y = C X + E U for the duty D that
gives the wanted output (scipy's brentq on the averaged dc equations), and the
small-signal model is::

    dx/dt = A x + B u + [(A1 - A2) X + (B1 - B2) U] d
    y     = C x + E u + [(C1 - C2) X + (E1 - E2) U] d

so Gvd = C (sI - A)^-1 f + g with f, g the bracketed vectors, and Gvg, Zout are
the vg and i_inj columns of C (sI - A)^-1 B + E.  Everything is evaluated
numerically, frequency by frequency.

Circuits (inductor voltage vL = L di/dt, output-node current delta * i)
---------------------------------------------------------------------
Resistances: Ron the controlled switch, Rr the rectifier (synchronous switch or
diode series resistance), DCR the inductor winding.  v is the output voltage
(negative for the inverting stage).

buck            on : vL = vg - (Ron + DCR) i - v,             delta = 1
                off: vL = -VD - (Rr + DCR) i - v,             delta = 1
boost           on : vL = vg - (Ron + DCR) i,                 delta = 0
                off: vL = vg - (Rr + DCR) i - VD - v,         delta = 1
inverting b-b   inductor from the switch node to ground; in the off interval
                the inductor current is drawn out of the output node through
                the rectifier, so the switch node sits at v - VD - Rr i:
                on : vL = vg - (Ron + DCR) i,                 delta = 0
                off: vL = v - VD - (Rr + DCR) i,              delta = -1
flyback         i the magnetising current seen from the primary, n = Np/Ns;
                DCR is the primary winding, which conducts only while the
                switch is on; in the off interval the secondary carries n i
                through the rectifier into the output node and the primary
                sees the secondary voltage times n:
                on : vL = vg - (Ron + DCR) i,                 delta = 0
                off: vL = -n (v + VD + Rr n i),               delta = n
four-switch     Q1 (Ron) / Q2 (Rr) the input leg, Q3 (Ron) / Q4 (Rr) the output
  buck mode     leg; Q4 stays on (with a diode rectifier, D4 conducts all the
                time and adds its drop):
                on : vL = vg - (Ron + DCR + Rr) i - v [- VD]
                off: vL = -(Rr + DCR + Rr) i - v - VD [- VD], delta = 1
  boost mode    Q1 stays on:
                on : vL = vg - (Ron + DCR + Ron) i,           delta = 0
                off: vL = vg - (Ron + DCR + Rr) i - VD - v,   delta = 1

Output node (all stages): banks k with ESR_k > 0 have capacitor voltage
vc_k and current (v - vc_k)/ESR_k; banks with ESR = 0 are in parallel with
no resistance between them, so they share one voltage (= v) and form one
state; the load R and the injected current complete Kirchhoff's current law::

    delta i + i_inj = v / R + sum_k (v - vc_k) / ESR_k + C0 dv/dt
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

__all__ = ["SsaParams", "SsaPoint", "four_switch_mode", "params_from_stage", "responses", "slopes", "solve"]

_TOPOLOGIES = ("buck", "boost", "inverting-buck-boost", "flyback", "four-switch-buck", "four-switch-boost")


@dataclass(frozen=True)
class SsaParams:
    """Switched-circuit parameters (SI units).

    ``topology`` is one of buck, boost, inverting-buck-boost, flyback,
    four-switch-buck, four-switch-boost.  ``banks`` is a tuple of
    (total capacitance F, total ESR ohm) per output bank.
    """

    topology: str
    fsw_hz: float
    l_h: float
    dcr: float
    r_on: float
    r_rect: float
    vd: float
    diode: bool
    banks: tuple
    turns_ratio: float = 1.0

    def __post_init__(self):
        if self.topology not in _TOPOLOGIES:
            raise ValueError(f"unknown reference topology {self.topology!r}")


def params_from_stage(stage, mode: str = "") -> SsaParams:
    """Reference parameters from a :class:`loopkit.design.Stage` (its data only).

    ``mode`` ("buck" or "boost") selects the four-switch operating mode.
    """
    topo = stage.topology
    if topo == "four-switch-buck-boost":
        if mode not in ("buck", "boost"):
            raise ValueError("four-switch needs mode 'buck' or 'boost'")
        topo = f"four-switch-{mode}"
    diode = stage.rectifier == "diode"
    # a bank of `count` parts in parallel: C times count, ESR over count
    banks = tuple((b.capacitance * b.count, b.esr / b.count) for b in stage.output_caps)
    return SsaParams(
        topology=topo,
        fsw_hz=stage.fsw,
        l_h=stage.inductance,
        dcr=stage.dcr,
        r_on=stage.r_switch,
        r_rect=stage.r_rectifier,
        vd=stage.diode_drop if diode else 0.0,
        diode=diode,
        banks=banks,
        turns_ratio=stage.turns_ratio,
    )


def _intervals(p: SsaParams):
    """Per interval: (a_g, a_v, a_d, r, delta) with vL = a_g vg + a_v v + a_d VD - r i.

    See the module docstring for the circuits.
    """
    ron, rr, rl, n = p.r_on, p.r_rect, p.dcr, p.turns_ratio
    t = p.topology
    if t == "buck":
        return (1.0, -1.0, 0.0, ron + rl, 1.0), (0.0, -1.0, -1.0, rr + rl, 1.0)
    if t == "boost":
        return (1.0, 0.0, 0.0, ron + rl, 0.0), (1.0, -1.0, -1.0, rr + rl, 1.0)
    if t == "inverting-buck-boost":
        return (1.0, 0.0, 0.0, ron + rl, 0.0), (0.0, 1.0, -1.0, rr + rl, -1.0)
    if t == "flyback":
        return (1.0, 0.0, 0.0, ron + rl, 0.0), (0.0, -n, -n, n * n * rr, n)
    if t == "four-switch-buck":
        always_vd = -1.0 if p.diode else 0.0  # D4 conducts in both intervals
        return ((1.0, -1.0, always_vd, ron + rl + rr, 1.0), (0.0, -1.0, -1.0 + always_vd, rr + rl + rr, 1.0))
    # four-switch boost mode: Q1 (Ron) always on
    return (1.0, 0.0, 0.0, ron + rl + ron, 0.0), (1.0, -1.0, -1.0, ron + rl + rr, 1.0)


def _state_matrices(p: SsaParams, r_load: float, interval) -> tuple[np.ndarray, ...]:
    """(A, B, C, E) of one interval; u = [vg, VD, i_inj], y = output voltage."""
    a_g, a_v, a_d, r, delta = interval
    esr_banks = [(c, esr) for c, esr in p.banks if esr > 0]
    c0 = sum(c for c, esr in p.banks if esr == 0)
    m = len(esr_banks)
    nx = 1 + m + (1 if c0 > 0 else 0)
    g = np.array([1.0 / esr for _, esr in esr_banks])
    # output voltage as a linear function of (x, u): v = vx . x + vu . u
    vx = np.zeros(nx)
    vu = np.zeros(3)
    if c0 > 0:
        vx[-1] = 1.0  # the zero-ESR banks hold the output node
    else:
        gt = 1.0 / r_load + g.sum()
        vx[0] = delta / gt
        vx[1 : 1 + m] = g / gt
        vu[2] = 1.0 / gt
    a = np.zeros((nx, nx))
    b = np.zeros((nx, 3))
    # inductor: L di/dt = a_g vg + a_d VD - r i + a_v v
    a[0] = a_v * vx / p.l_h
    a[0, 0] -= r / p.l_h
    b[0] = a_v * vu / p.l_h
    b[0, 0] += a_g / p.l_h
    b[0, 1] += a_d / p.l_h
    # ESR banks: C_k dvc_k/dt = (v - vc_k) / ESR_k
    for k, (c, _) in enumerate(esr_banks):
        a[1 + k] = g[k] * vx / c
        a[1 + k, 1 + k] -= g[k] / c
        b[1 + k] = g[k] * vu / c
    if c0 > 0:  # C0 dv/dt = delta i + i_inj - v/R - sum_k (v - vc_k)/ESR_k
        row = -(1.0 / r_load + g.sum()) * vx
        row[0] += delta
        row[1 : 1 + m] += g
        a[-1] = row / c0
        b[-1, 2] = 1.0 / c0
    return a, b, vx[None, :], vu[None, :]


@dataclass(frozen=True)
class SsaPoint:
    """Averaged dc point and the matrices needed for the small-signal model."""

    params: SsaParams
    duty: float
    x: np.ndarray  # dc states; x[0] is the average inductor current
    u: np.ndarray
    y: float
    ripple_pp: float  # first-order inductor ripple: (dx/dt in interval 1)[0] * D Ts
    m1: tuple
    m2: tuple

    @property
    def i_l(self) -> float:
        return float(self.x[0])

    def averaged(self, duty=None):
        d = self.duty if duty is None else duty
        return tuple(d * a1 + (1.0 - d) * a2 for a1, a2 in zip(self.m1, self.m2))


def _dc_output(m1, m2, u, duties):
    """Averaged dc output voltage for an array of duties."""
    a = duties[:, None, None] * m1[0] + (1 - duties)[:, None, None] * m2[0]
    b = duties[:, None, None] * m1[1] + (1 - duties)[:, None, None] * m2[1]
    c = duties[:, None, None] * m1[2] + (1 - duties)[:, None, None] * m2[2]
    e = duties[:, None, None] * m1[3] + (1 - duties)[:, None, None] * m2[3]
    x = -np.linalg.solve(a, (b @ u)[..., None])
    return (c @ x)[..., 0, 0] + (e @ u)[..., 0]


def solve(p: SsaParams, vg: float, vout: float, load: float) -> SsaPoint:
    """DC point for output ``vout`` (signed) with load current ``load`` (R = |vout|/load).

    The duty is the lowest one at which the output magnitude rises through
    ``|vout|`` (the physical branch of boost-type stages, whose output falls
    again at high duty because of the losses): a scan of the averaged dc output
    locates that crossing and scipy.optimize.brentq refines it.  ValueError if
    there is none (the stage cannot make vout).
    """
    r_load = abs(vout) / load
    m1 = _state_matrices(p, r_load, _intervals(p)[0])
    m2 = _state_matrices(p, r_load, _intervals(p)[1])
    u = np.array([vg, p.vd, 0.0])
    grid = np.linspace(1e-6, 1.0 - 1e-6, 4001)
    err = (_dc_output(m1, m2, u, grid) - vout) * np.sign(vout)
    cross = np.nonzero((err[:-1] < 0) & (err[1:] >= 0))[0]  # |output| rising through |vout|
    if cross.size == 0:
        raise ValueError(f"reference: no duty gives {vout} V from {vg} V at {load} A")
    k = cross[0]

    def f(d):
        return float(_dc_output(m1, m2, u, np.array([d]))[0]) - vout

    duty = brentq(f, grid[k], grid[k + 1], xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=200)
    a = duty * m1[0] + (1 - duty) * m2[0]
    b = duty * m1[1] + (1 - duty) * m2[1]
    x = -np.linalg.solve(a, b @ u)
    c = duty * m1[2] + (1 - duty) * m2[2]
    e = duty * m1[3] + (1 - duty) * m2[3]
    y = float((c @ x + e @ u)[0])
    slope_on = (m1[0] @ x + m1[1] @ u)[0]
    return SsaPoint(p, float(duty), x, u, y, float(slope_on * duty / p.fsw_hz), m1, m2)


def responses(pt: SsaPoint, f_hz) -> dict[str, np.ndarray]:
    """Gvd, Gvg, Zout and the inductor current's Gid, Gig, Gii (complex, one value per frequency in Hz).

    Gig: line to inductor current; Gii: current injected into the output node to
    inductor current (the state x[0]; flyback: magnetising current seen from the
    primary).
    """
    a, b, c, e = pt.averaged()
    (a1, b1, c1, e1), (a2, b2, c2, e2) = pt.m1, pt.m2
    f_vec = (a1 - a2) @ pt.x + (b1 - b2) @ pt.u
    g_vec = float(((c1 - c2) @ pt.x + (e1 - e2) @ pt.u)[0])
    s = 2j * np.pi * np.asarray(f_hz, float)
    nx = a.shape[0]
    si_a = s[:, None, None] * np.eye(nx)[None] - a[None]
    rhs = np.stack([f_vec, b[:, 0], b[:, 2]], axis=1).astype(complex)  # (nx, 3)
    sol = np.linalg.solve(si_a, np.broadcast_to(rhs, (s.size,) + rhs.shape))
    y = c[0] @ sol  # (nf, 3)
    # the inductor current is state 0: its control-to-state response is Gid (vg = 0)
    return {
        "gvd": y[:, 0] + g_vec,
        "gvg": y[:, 1] + e[0, 0],
        "zout": y[:, 2] + e[0, 2],
        "gid": sol[:, 0, 0],
        "gig": sol[:, 0, 1],
        "gii": sol[:, 0, 2],
    }


def slopes(pt: SsaPoint) -> tuple[float, float]:
    """Inductor current slopes (A/s, magnitudes) in the on and off intervals at the averaged dc state.

    ``dx/dt`` of interval k at (X, U), state 0; flyback: the magnetising current
    seen from the primary.
    """
    (a1, b1, _, _), (a2, b2, _, _) = pt.m1, pt.m2
    return float((a1 @ pt.x + b1 @ pt.u)[0]), float(-(a2 @ pt.x + b2 @ pt.u)[0])


def four_switch_mode(stage, vg: float, vout: float, load: float) -> tuple[str, str]:
    """(mode modelled, label) by the rule stated for the four-switch stage.

    Buck mode where vg > vout and the buck duty needed (with losses, from this
    reference) is at most ``buck_max_duty``; otherwise boost mode where the
    boost duty needed is at least ``boost_min_duty``; otherwise the transition
    band, modelled in the mode that can regulate: boost below vout or when no
    buck duty below 1 gives vout, buck otherwise.
    """

    def duty(mode):
        try:
            return solve(params_from_stage(stage, mode), vg, vout, load).duty
        except ValueError:
            return None

    d_buck = duty("buck") if vg > vout else None
    if d_buck is not None and d_buck <= stage.buck_max_duty:
        return "buck", "buck"
    d_boost = duty("boost")
    if d_boost is not None and d_boost >= stage.boost_min_duty:
        return "boost", "boost"
    return ("boost" if vg < vout or d_buck is None else "buck"), "transition"
