"""Voltage-mode control: the error amplifier's output is compared with a fixed ramp.

The duty cycle follows the control voltage through the PWM gain ``1 / Vramp``
(Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., sec. 7.6),
so the uncompensated loop is the product::

    Tu(s) = H(s) Fm Gvd(s),   Fm = 1 / Vramp

with ``H`` the sensing (divider or differential amplifier, :mod:`loopkit.networks.sensing`).
With input-voltage feed-forward the ramp grows with the input, ``Vramp = ramp vin / vin_nominal``,
so ``Fm`` falls as the input rises and cancels the input-voltage dependence of ``Gvd``.
"""

from __future__ import annotations

import numpy as np

from ..networks.sensing import sensing_transfer
from ..rational import Rational
from .base import SchemeLoop

__all__ = ["NAME", "TITLE", "modulator_transfer", "uncompensated"]

NAME = "voltage-mode"
TITLE = "voltage mode"


def modulator_transfer(design, vin: np.ndarray) -> Rational:
    """PWM gain 1/Vramp per corner; with feed-forward the ramp scales with vin."""
    mod = design.modulator
    ramp = np.full(vin.shape, mod.ramp)
    if mod.feedforward:
        nominal = design.operating.vin_nominal or float(np.median(design.operating.vin))
        ramp = mod.ramp * vin / nominal
    return Rational.constant(1.0 / ramp)


def uncompensated(design, stage, loop_only: bool = False) -> SchemeLoop:
    """Tu = H Fm Gvd at every corner (``loop_only``: the same; the contract of every scheme)."""
    fm = modulator_transfer(design, stage.vin)
    return SchemeLoop(tu=sensing_transfer(design) * fm * stage.gvd, gvg=stage.gvg, zout=stage.zout,
                      figures={"fm": fm.gain.copy()}, findings=())
