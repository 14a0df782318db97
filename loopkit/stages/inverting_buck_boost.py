"""Inverting buck-boost: negative output, |V| above or below Vg.

Inductor from the switch node to ground; the switch connects it to Vg for D Ts,
the rectifier to the (negative) output for D' Ts.  CCM steady state with
losses, x = D', Io = |V|/R = D' I, the series resistance
``Req = DCR + D Ron + D' Rr + D D' Rp`` (``Rp = R || ESR ...``: the pulsed
rectifier current through the capacitor ESR, Middlebrook and Cuk 1976; see
:mod:`.base`):
``-(Vg + |V| + VD - Io Rp) x^2 + (Vg + Io (Ron - Rr - Rp)) x - Io (Ron + DCR) = 0``.
Small signal: ``a_g = D``, ``a_v = D'``, ``b_i = -D'``, ``b_d = +I`` and
``e = Vg + |V| + VD - I (Ron - Rr) - (1 - 2D) Rp I``; Gvd(0) is negative (a rising duty makes
the output more negative).  Ideal: |Gd0| = |V|/(D D'), RHP zero D'^2 R/(D L)
(Erickson & Maksimovic, 2nd ed., Table 8.2).

DCM (diode): energy per cycle Vg^2 D^2 Ts/(2L) delivered to V' = |V| + VD:
``i2 = Vg^2 / (Re V')``; j2 = 2 Io/D, r2 = Re (V'/Vg)^2, g2 = 2 Vg/(Re V')
(Erickson & Maksimovic ch. 11, buck-boost row); the current leaves the output
node, so the model's sign is -1.  Conduction losses enter through the
effective voltages of :func:`energy_dcm`.
"""

from __future__ import annotations

import numpy as np

from ..design import Stage
from .base import DCM_ITERATIONS, CcmPoint, DcmPoint, pulsed_esr_resistance, solve_quadratic_dprime

__all__ = ["ccm", "dcm", "ideal_ratio", "range_problem", "slope_sensitivity"]


def ideal_ratio(duty):
    return -duty / (1.0 - duty)


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    return None


def ccm(stage: Stage, vin, load, vout: float) -> CcmPoint:
    vg, io, vm = np.asarray(vin, float), np.asarray(load, float), abs(float(vout))
    ron, rr, rl, vd = stage.r_switch, stage.r_rectifier, stage.dcr, stage.vf
    rp = pulsed_esr_resistance(stage, vm / io)
    dp = solve_quadratic_dprime(vg + vm + vd - io * rp, vg + io * (ron - rr - rp), io * (ron + rl))
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
        a_g=duty,
        a_v=dp,
        b_i=-dp,
        b_d=i_l,
        e=vg + vm + vd - i_l * (ron - rr) - (1.0 - 2.0 * duty) * rp * i_l,
    )


def energy_dcm(vg, v1, io, lh, ts, r_on, r_off, turns=1.0, r_pulse=0.0) -> DcmPoint:
    """DCM point of a stage that stores energy in L while on and releases it all to V' = |V| + VD.

    ``r_on`` is the resistance in the inductor's path while it charges, ``r_off``
    the one in the output-side path while it discharges (where the current is
    ``turns`` times the primary current).  The drops are taken at the mean
    current of each triangle; with them the lossless relations hold with the
    effective voltages a = Vg - ipk r_on / 2 and b = V' + turns ipk r_off / 2:
    Io = a^2 D^2 Ts / (2 L b).  ``r_pulse`` (R || ESR, see
    :func:`.base.pulsed_esr_resistance`) adds the output's own rise while the
    rectifier's pulse flows into it, r_pulse (turns ipk / 2 - Io), to b.
    """
    i_peak = np.zeros_like(vg)
    for _ in range(DCM_ITERATIONS):
        a = vg - 0.5 * i_peak * r_on
        b = v1 + 0.5 * turns * i_peak * r_off + r_pulse * (0.5 * turns * i_peak - io)
        duty = np.sqrt(2.0 * lh * io * b / (ts * a**2))
        i_peak = a * duty * ts / lh
    re = 2.0 * lh / (duty**2 * ts)
    return DcmPoint(
        duty=duty,
        d2=duty * a / (turns * b),
        i_peak=i_peak,
        j2=2.0 * io / duty,
        g2=2.0 * a / (re * b),
        r2=re * (b / a) ** 2,
        sign=1.0,
        turns=turns,
    )


def dcm(stage: Stage, vin, load, vout: float) -> DcmPoint:
    vg = np.asarray(vin, float)
    v1 = abs(float(vout)) + stage.vf
    io = np.asarray(load, float)
    point = energy_dcm(vg, v1, io, stage.inductance, 1.0 / stage.fsw, stage.r_switch + stage.dcr,
                       stage.r_rectifier + stage.dcr, 1.0, pulsed_esr_resistance(stage, abs(float(vout)) / io))
    return DcmPoint(**{**point.__dict__, "sign": -1.0})


def slope_sensitivity(stage: Stage) -> np.ndarray:
    """Sensitivities of the inductor slopes to vg and v (signed, negative), 1/H.

    ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]``; on: ``sn = vg/L``; off:
    ``sf = |v|/L = -v/L`` (ideal).
    """
    return np.array([[1.0, 0.0], [0.0, -1.0]]) / stage.inductance
