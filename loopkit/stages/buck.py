"""Buck (step-down), synchronous or with a diode rectifier.

CCM steady state with conduction losses: the inductor loop averaged over a
period, ``D (Vg - I Ron) - D' (VD + I Rr) - I DCR - V = 0`` with ``I = Io``,
solved for D.  Small signal: ``a_g = D``, ``a_v = -1``, ``b_i = 1``, ``b_d = 0``
and ``e = Vg - I (Ron - Rr) + VD`` in the equations of :mod:`.base`.  With
ideal parts Gvd(0) = V/D and Gvg(0) = D (Erickson & Maksimovic, 2nd ed.,
Table 8.2).

DCM (diode): the inductor current rises at (Vg - V)/L for D Ts and falls at
(V + VD)/L for D2 Ts; with Vg' = Vg + VD and V' = V + VD the average inductor
(= output) current is ``i2 = D^2 Ts Vg' (Vg' - V') / (2 L V')``.  Its partial
derivatives give j2 = 2 Io / D, r2 = Re (V'/Vg')^2 and g2 = (2 Vg' - V')/(Re V')
with Re = 2 L / (D^2 Ts), the buck row of Erickson & Maksimovic ch. 11.
Conduction losses: the inductor voltages while rising and falling are taken as
a = Vg - V - (Ron + DCR) ipk/2 and b = V + VD + (Rr + DCR) ipk/2 (the drops at
each triangle's mean current); the relations above hold with Vg' = a + b and
V' = b, solved by a few fixed-point steps on ipk.
"""

from __future__ import annotations

import numpy as np

from ..design import Stage
from .base import DCM_ITERATIONS, CcmPoint, DcmPoint, pulsed_esr_resistance

__all__ = ["ccm", "dcm", "ideal_ratio", "range_problem", "slope_sensitivity"]


def ideal_ratio(duty):
    """V/Vg of the ideal stage in CCM."""
    return duty


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    """Index of the first input voltage from which this stage cannot make vout."""
    bad = np.nonzero(vin <= vout)[0]
    return int(bad[0]) if bad.size else None


def ccm(stage: Stage, vin, load, vout: float) -> CcmPoint:
    vg, io, v = np.asarray(vin, float), np.asarray(load, float), float(vout)
    ron, rr, rl, vd = stage.r_switch, stage.r_rectifier, stage.dcr, stage.vf
    duty = (v + io * (rl + rr) + vd) / (vg - io * (ron - rr) + vd)
    i_l = io
    dp = 1.0 - duty
    ripple = (vg - i_l * (ron + rl) - v) * duty / (stage.inductance * stage.fsw)
    n = vg.shape[0]
    return CcmPoint(
        duty=duty,
        i_l=i_l,
        ripple=ripple,
        out_per_il=np.ones(n),
        l_h=np.full(n, stage.inductance),
        r_series=rl + duty * ron + dp * rr,
        a_g=duty,
        a_v=-np.ones(n),
        b_i=np.ones(n),
        b_d=np.zeros(n),
        e=vg - i_l * (ron - rr) + vd,
    )


def dcm(stage: Stage, vin, load, vout: float) -> DcmPoint:
    vg, io, v = np.asarray(vin, float), np.asarray(load, float), float(vout)
    ts, lh = 1.0 / stage.fsw, stage.inductance
    r_on, r_off = stage.r_switch + stage.dcr, stage.r_rectifier + stage.dcr
    rp = pulsed_esr_resistance(stage, abs(v) / io)
    i_peak = np.zeros_like(vg)
    for _ in range(DCM_ITERATIONS):
        # inductor voltage while rising (a) and falling (b): resistive drops at the mean current
        # ipk/2, and the output's own rise (R || ESR) while it carries that pulse
        ripple = rp * (0.5 * i_peak - io)
        a = vg - v - 0.5 * i_peak * r_on - ripple
        b = v + stage.vf + 0.5 * i_peak * r_off + ripple
        duty = np.sqrt(2.0 * lh * io * b / (ts * a * (a + b)))
        i_peak = a * duty * ts / lh
    vg1, v1 = a + b, b  # the lossless relations hold with these effective voltages
    re = 2.0 * lh / (duty**2 * ts)
    return DcmPoint(
        duty=duty,
        d2=duty * a / b,
        i_peak=i_peak,
        j2=2.0 * io / duty,
        g2=(2.0 * vg1 - v1) / (re * v1),
        r2=re * (v1 / vg1) ** 2,
        sign=1.0,
        fed_while_on=True,
    )


def slope_sensitivity(stage: Stage) -> np.ndarray:
    """Sensitivities of the inductor slopes to vg and v, 1/H: ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]``.

    On: ``sn = (vg - v)/L``; off: ``sf = v/L`` (ideal; the conduction drops do not
    depend on vg or v).  Used for the feedforward and feedback gains of peak
    current-mode control (Ridley 1991).
    """
    return np.array([[1.0, -1.0], [0.0, 1.0]]) / stage.inductance
