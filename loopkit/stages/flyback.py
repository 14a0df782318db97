"""Flyback: isolated buck-boost, turns ratio n = Np/Ns, magnetising inductance Lm.

Quantities are seen from the primary: i is the magnetising current, the
secondary current during D' Ts is n i and the reflected output n (V + VD + n i Rr).
``stage.dcr`` is the primary winding resistance: it carries current only while
the switch is on (during D' Ts the magnetising current flows in the
secondary); ``stage.r_rectifier`` is the secondary rectifier resistance (add the
secondary winding to it).  With ``Rp = R || ESR ...`` (the pulsed secondary
current through the capacitor ESR, Middlebrook and Cuk 1976; see :mod:`.base`)
the averaged series resistance is ``Req = D (Ron + DCR) + D' n^2 Rr + D D' n^2 Rp``.
CCM steady state with losses, x = D', Io = n D' I:
``-(Vg + n(V + VD) - n Io Rp) x^2 + (Vg + Io (Ron + DCR)/n - n Io (Rr + Rp)) x
- Io (Ron + DCR)/n = 0``.
Small signal: ``a_g = D``, ``a_v = -n D'``, ``b_i = n D'``, ``b_d = -n I``,
``e = Vg + n (V + VD) - I (Ron + DCR - n^2 Rr) - (1 - 2D) n^2 Rp I``: the
buck-boost of Erickson & Maksimovic (2nd ed., Table 8.2) with the secondary
referred through n (ideal: V/Vg = D/(n D'), RHP zero D'^2 R n^2 / (D Lm)).

DCM: the energy Vg^2 D^2 Ts/(2 Lm) goes to V' = V + VD, as in the buck-boost
(see :func:`.inverting_buck_boost.energy_dcm`); the secondary conducts for
D2 = D Vg / (n V').
"""

from __future__ import annotations

import numpy as np

from ..design import Stage
from .base import CcmPoint, DcmPoint, pulsed_esr_resistance, solve_quadratic_dprime
from .inverting_buck_boost import energy_dcm

__all__ = ["ccm", "dcm", "ideal_ratio", "range_problem", "slope_sensitivity"]


def ideal_ratio(duty, turns_ratio=1.0):
    return duty / ((1.0 - duty) * turns_ratio)


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    return None


def ccm(stage: Stage, vin, load, vout: float) -> CcmPoint:
    vg, io, v = np.asarray(vin, float), np.asarray(load, float), float(vout)
    n_t = stage.turns_ratio
    ron, rr, rl, vd = stage.r_switch, stage.r_rectifier, stage.dcr, stage.vf
    rp = pulsed_esr_resistance(stage, v / io)
    dp = solve_quadratic_dprime(
        vg + n_t * (v + vd) - n_t * io * rp, vg + io * (ron + rl) / n_t - n_t * io * (rr + rp), io * (ron + rl) / n_t
    )
    duty = 1.0 - dp
    i_l = io / (n_t * dp)
    n = vg.shape[0]
    return CcmPoint(
        duty=duty,
        i_l=i_l,
        ripple=(vg - i_l * (ron + rl)) * duty / (stage.inductance * stage.fsw),
        out_per_il=n_t * dp,
        l_h=np.full(n, stage.inductance),
        r_series=duty * (ron + rl) + dp * n_t**2 * rr + duty * dp * n_t**2 * rp,
        a_g=duty,
        a_v=-n_t * dp,
        b_i=n_t * dp,
        b_d=-n_t * i_l,
        e=vg + n_t * (v + vd) - i_l * (ron + rl - n_t**2 * rr) - (1.0 - 2.0 * duty) * n_t**2 * rp * i_l,
    )


def dcm(stage: Stage, vin, load, vout: float) -> DcmPoint:
    vg = np.asarray(vin, float)
    v1 = float(vout) + stage.vf
    # the primary winding resistance carries current only while the switch is on
    io = np.asarray(load, float)
    return energy_dcm(vg, v1, io, stage.inductance, 1.0 / stage.fsw, stage.r_switch + stage.dcr,
                      stage.r_rectifier, stage.turns_ratio, pulsed_esr_resistance(stage, float(vout) / io))


def slope_sensitivity(stage: Stage) -> np.ndarray:
    """Sensitivities of the magnetising-current slopes (seen from the primary) to vg and v, 1/H.

    ``[[dsn/dvg, dsn/dv], [dsf/dvg, dsf/dv]]``; on: ``sn = vg/Lm``; off: the
    secondary current falls at ``v/(Lm/n^2)``, i.e. ``sf = n v/Lm`` referred to the
    primary (ideal).
    """
    return np.array([[1.0, 0.0], [0.0, stage.turns_ratio]]) / stage.inductance
