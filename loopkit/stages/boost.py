"""Boost (step-up), synchronous or with a diode rectifier.

CCM steady state with conduction losses: ``Vg - I (DCR + D Ron + D' Rr +
D D' Rp) - D' (V + VD) = 0`` with ``I = Io / D'`` and ``Rp = R || ESR ...`` (the
pulsed diode current through the capacitor ESR, Middlebrook and Cuk 1976; see
:mod:`.base`); multiplied by D' it is the quadratic
``-(V + VD - Io Rp) x^2 + (Vg + Io (Ron - Rr - Rp)) x - Io (DCR + Ron) = 0`` in
x = D'.  Small signal: ``a_g = 1``, ``a_v = -D'``, ``b_i = D'``, ``b_d = -I``,
``Req = DCR + D Ron + D' Rr + D D' Rp`` and
``e = V + VD - I (Ron - Rr) - (1 - 2D) Rp I``, so Gvd has the right-half-plane
zero at ``(D' e - I Req) / (I L)``, i.e. ``(D'^2 R - Req) / L`` to first order
(ideal: D'^2 R / L, Erickson & Maksimovic, 2nd ed., Table 8.2).

DCM (diode): on for D Ts at slope Vg/L, off for D2 Ts at (V' - Vg)/L with
V' = V + VD; the diode current is ``i2 = D^2 Ts Vg^2 / (2 L (V' - Vg))``, which
gives j2 = 2 Io/D, r2 = Re ((V' - Vg)/Vg)^2, g2 = Vg (2V' - Vg) / (Re (V' - Vg)^2)
(Erickson & Maksimovic ch. 11, boost row).  Conduction losses: with the drops
at each triangle's mean current ipk/2, Vg becomes a = Vg - (Ron + DCR) ipk/2 and
V' - Vg becomes b = V + VD + (Rr + DCR) ipk/2 - Vg (fixed-point steps on ipk).
"""

from __future__ import annotations

import numpy as np

from ..design import Stage
from .base import DCM_ITERATIONS, CcmPoint, DcmPoint, pulsed_esr_resistance, solve_quadratic_dprime

__all__ = ["ccm", "dcm", "ideal_ratio", "range_problem", "slope_sensitivity"]


def ideal_ratio(duty):
    return 1.0 / (1.0 - duty)


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    bad = np.nonzero(vin >= vout)[0]
    return int(bad[0]) if bad.size else None


def ccm(stage: Stage, vin, load, vout: float) -> CcmPoint:
    vg, io, v = np.asarray(vin, float), np.asarray(load, float), float(vout)
    ron, rr, rl, vd = stage.r_switch, stage.r_rectifier, stage.dcr, stage.vf
    rp = pulsed_esr_resistance(stage, v / io)
    dp = solve_quadratic_dprime(v + vd - io * rp, vg + io * (ron - rr - rp), io * (rl + ron))
    duty = 1.0 - dp
    i_l = io / dp
    n = vg.shape[0]
    return CcmPoint(
        duty=duty,
        i_l=i_l,
        ripple=(vg - i_l * (ron + rl)) * duty / (stage.inductance * stage.fsw),
        out_per_il=dp,
        l_h=np.full(n, stage.inductance),
        r_series=rl + duty * ron + dp * rr + duty * dp * rp,
        a_g=np.ones(n),
        a_v=-dp,
        b_i=dp,
        b_d=-i_l,
        e=v + vd - i_l * (ron - rr) - (1.0 - 2.0 * duty) * rp * i_l,
    )


def dcm(stage: Stage, vin, load, vout: float) -> DcmPoint:
    vg, io, v = np.asarray(vin, float), np.asarray(load, float), float(vout)
    ts, lh = 1.0 / stage.fsw, stage.inductance
    r_on, r_off = stage.r_switch + stage.dcr, stage.r_rectifier + stage.dcr
    rp = pulsed_esr_resistance(stage, v / io)
    i_peak = np.zeros_like(vg)
    for _ in range(DCM_ITERATIONS):
        # inductor voltage while rising (a) and falling (b): resistive drops at the mean current
        # ipk/2, and the output's own rise (R || ESR) while the diode pulse flows into it
        a = vg - 0.5 * i_peak * r_on
        b = v + stage.vf + 0.5 * i_peak * r_off + rp * (0.5 * i_peak - io) - vg
        duty = np.sqrt(2.0 * lh * io * b / (ts * a**2))
        i_peak = a * duty * ts / lh
    re = 2.0 * lh / (duty**2 * ts)
    return DcmPoint(
        duty=duty,
        d2=duty * a / b,
        i_peak=i_peak,
        j2=2.0 * io / duty,
        g2=a * (a + 2.0 * b) / (re * b**2),
        r2=re * (b / a) ** 2,
        sign=1.0,
    )


def slope_sensitivity(stage: Stage) -> np.ndarray:
    """Sensitivities of the inductor slopes to vg and v, 1/H: ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]``.

    On: ``sn = vg/L``; off: ``sf = (v - vg)/L`` (ideal).
    """
    return np.array([[1.0, 0.0], [-1.0, 1.0]]) / stage.inductance
