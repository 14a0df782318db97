"""Non-inverting four-switch (two-switch-leg) buck-boost, run in buck or boost mode.

Switches: Q1/Q2 the buck leg (Q2 the rectifier), Q3/Q4 the boost leg (Q4 the
rectifier).  In buck mode Q4 stays on, so the stage is a buck whose inductor
path carries Q4's resistance (``r_rectifier``) too; in boost mode Q1 stays on
and the stage is a boost with Q1's resistance (``r_switch``) in series.

With diode rectifiers (a two-switch buck-boost: D2 for Q2, D4 for Q4) the
output diode D4 conducts all the time in buck mode, so its drop is in series
with the output in both intervals: the stage runs as a buck making
``vout + VD`` (:data:`buck_mode`).

Mode rule: buck mode while the buck duty needed (with losses) is at most
``stage.buck_max_duty``; otherwise boost mode.  Where the boost duty needed
would be below ``stage.boost_min_duty`` the corner is in the transition band:
it is modelled in the pure mode that can regulate (see :func:`split`) and
flagged, because a real controller there alternates or blends the modes.
"""

from __future__ import annotations

from dataclasses import replace
from types import SimpleNamespace

import numpy as np

from ..design import Stage
from . import boost, buck

__all__ = ["buck_mode", "ideal_ratio", "range_problem", "split"]


def ideal_ratio(duty, mode="buck"):
    return buck.ideal_ratio(duty) if mode == "buck" else boost.ideal_ratio(duty)


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    return None


def as_buck(stage: Stage) -> Stage:
    return replace(stage, topology="buck", dcr=stage.dcr + stage.r_rectifier)


def as_boost(stage: Stage) -> Stage:
    return replace(stage, topology="boost", dcr=stage.dcr + stage.r_switch)


def _buck_mode_ccm(stage: Stage, vin, load, vout: float):
    return buck.ccm(stage, vin, load, float(vout) + stage.vf)


def _buck_mode_dcm(stage: Stage, vin, load, vout: float):
    return buck.dcm(stage, vin, load, float(vout) + stage.vf)


#: Buck mode as a topology module: the buck with D4's drop (if any) added to vout.
buck_mode = SimpleNamespace(
    ccm=_buck_mode_ccm,
    dcm=_buck_mode_dcm,
    ideal_ratio=buck.ideal_ratio,
    range_problem=buck.range_problem,
    slope_sensitivity=buck.slope_sensitivity,
)


def split(stage: Stage, vin, load, vout: float):
    """Corners per mode: list of (indices, stage as run, module, mode label).

    Buck mode where vin > vout and the buck duty needed is at most
    ``buck_max_duty``; otherwise boost mode where the boost duty needed is at
    least ``boost_min_duty``; the rest is the transition band, modelled in the
    pure mode that can still regulate there: boost mode below vout, and also at
    or just above vout when the conduction losses leave the buck no duty below
    100 %; buck mode otherwise.
    """
    vin = np.asarray(vin, float)
    load = np.asarray(load, float)
    above = vin > vout
    below = vin < vout
    buck_d = np.full(vin.shape, np.nan)
    if np.any(above):
        buck_d[above] = buck_mode.ccm(as_buck(stage), vin[above], load[above], vout).duty
    with np.errstate(invalid="ignore"):
        buck_ok = above & (buck_d <= stage.buck_max_duty)
        buck_can = (buck_d > 0.0) & (buck_d < 1.0)
    rest = ~buck_ok
    boost_d = np.full(vin.shape, np.nan)
    if np.any(rest):
        boost_d[rest] = boost.ccm(as_boost(stage), vin[rest], load[rest], vout).duty
    with np.errstate(invalid="ignore"):
        boost_ok = rest & (boost_d >= stage.boost_min_duty) & (boost_d < 1.0)
    band = rest & ~boost_ok
    band_boost = band & (below | ~buck_can)
    groups = []
    for mask, st, module, label in (
        (buck_ok, as_buck(stage), buck_mode, "buck"),
        (boost_ok, as_boost(stage), boost, "boost"),
        (band_boost, as_boost(stage), boost, "transition"),
        (band & ~band_boost, as_buck(stage), buck_mode, "transition"),
    ):
        if np.any(mask):
            groups.append((np.nonzero(mask)[0], st, module, label))
    return groups
