"""Non-inverting four-switch (two-switch-leg) buck-boost, run in buck or boost mode.

Switches: Q1/Q2 the buck leg (Q2 the rectifier), Q3/Q4 the boost leg (Q4 the
rectifier).  In buck mode Q4 stays on, so the stage is a buck whose inductor
path carries Q4's resistance (``r_rectifier``) too; in boost mode Q1 stays on
and the stage is a boost with Q1's resistance (``r_switch``) in series.

Mode rule: buck mode while the buck duty needed (with losses) is at most
``stage.buck_max_duty``; otherwise boost mode.  Where the boost duty needed
would be below ``stage.boost_min_duty`` the corner is in the transition band:
it is modelled in boost mode at that duty and flagged, because a real
controller there alternates or blends the modes.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..design import Stage
from . import boost, buck

__all__ = ["split", "ideal_ratio", "range_problem"]


def ideal_ratio(duty, mode="buck"):
    return buck.ideal_ratio(duty) if mode == "buck" else boost.ideal_ratio(duty)


def range_problem(stage: Stage, vin: np.ndarray, vout: float) -> int | None:
    return None


def as_buck(stage: Stage) -> Stage:
    return replace(stage, topology="buck", dcr=stage.dcr + stage.r_rectifier)


def as_boost(stage: Stage) -> Stage:
    return replace(stage, topology="boost", dcr=stage.dcr + stage.r_switch)


def split(stage: Stage, vin, load, vout: float):
    """Corners per mode: list of (indices, stage as run, module, mode label).

    Transition-band corners are modelled in boost mode below vout and in buck
    mode at or above it (the pure mode that can still regulate there).
    """
    vin = np.asarray(vin, float)
    load = np.asarray(load, float)
    above = vin > vout
    below = vin < vout
    buck_ok = np.zeros(vin.shape, bool)
    boost_ok = np.zeros(vin.shape, bool)
    if np.any(above):
        d = buck.ccm(as_buck(stage), vin[above], load[above], vout).duty
        buck_ok[np.nonzero(above)[0][d <= stage.buck_max_duty]] = True
    if np.any(below):
        d = boost.ccm(as_boost(stage), vin[below], load[below], vout).duty
        boost_ok[np.nonzero(below)[0][d >= stage.boost_min_duty]] = True
    band = ~(buck_ok | boost_ok)
    groups = []
    for mask, st, module, label in (
        (buck_ok, as_buck(stage), buck, "buck"),
        (boost_ok, as_boost(stage), boost, "boost"),
        (band & below, as_boost(stage), boost, "transition"),
        (band & ~below, as_buck(stage), buck, "transition"),
    ):
        if np.any(mask):
            groups.append((np.nonzero(mask)[0], st, module, label))
    return groups
