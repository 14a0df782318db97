"""What a control scheme gives the loop: the uncompensated loop and its own figures.

A control scheme module (one per scheme, registered in :mod:`loopkit.schemes`)
provides ``NAME`` (the design file's ``[control] scheme``), ``TITLE`` and
``uncompensated(design, stage) -> SchemeLoop``: the loop from the error
amplifier's output back to its input without the compensator network, ``Tu``
(and the line-to-output and output impedance with the scheme's inner loops closed),
so that the loop gain is ``T = -Tu Gc`` for every network (the networks are
inverting).  Figures are per-corner arrays the scheme reports (modulator gain,
for current mode mc and Qp); findings are the scheme's own warnings.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..rational import Rational

__all__ = ["SchemeLoop"]


@dataclass(frozen=True, eq=False)
class SchemeLoop:
    """The uncompensated loop of a control scheme at every corner.

    Attributes
    ----------
    tu : Rational
        Sensing x scheme x plant, from the error-amplifier output to its input.
    gvg, zout : Rational
        Line-to-output and output impedance with every inner loop of the scheme closed and the
        outer (voltage) loop open: the closed-loop figures are these over ``1 + T``.
    figures : dict of str -> ndarray (corners,)
        The scheme's own per-corner figures, e.g. ``fm`` (modulator gain, 1/V).
    findings : tuple of Finding
    sampled : Discrete or None
        A sampled scheme (digital control): ``tu`` behind the hold and the loop delay, exactly in z
        (ADC counts per PWM count); the loop gain is then ``T = sampled C(z)`` with the digital
        controller ``C``.  None for continuous schemes.
    """

    tu: Rational
    gvg: Rational
    zout: Rational
    figures: dict = field(default_factory=dict)
    findings: tuple = ()
    sampled: object = None
