"""How the output reaches the compensator network: divider or differential amplifier.

Divider (``sensing.kind = "divider"``)
    The divider's top resistor is the input element R1 of an op-amp network
    and its bottom resistor sets only the dc output (the inverting input is a
    virtual ground), so the sensing transfer is 1; the gm and optocoupler
    networks take the divider ratio or the output themselves.

Differential amplifier (``sensing.kind = "differential"``)
    The amplifier senses the output against the load's ground and makes the
    reference voltage from it, so its gain is ``vref / vout``: for a negative
    output ``-k`` with ``k = vref / |vout|`` (it senses ground minus output),
    for a positive output (remote sensing) ``+k``.  Its small-signal transfer
    from the output is::

        Hs(s) = (vref / vout) / (1 + s / (2 pi f_bw))

    with ``f_bw = sensing.diff_bandwidth`` its -3 dB frequency (0 = no pole).
    The sign matters: with an inverting buck-boost (negative Gvd) it makes the
    loop's sign that of a buck.
"""

from __future__ import annotations

import math

from ..design import Design
from ..errors import DesignError
from ..rational import TWO_PI, Rational
from ..units import format_value

__all__ = ["differential_gain", "differential_transfer", "sensing_transfer"]


def differential_gain(vref: float, vout: float) -> float:
    """Magnitude ``k = vref / |vout|`` of the differential amplifier's gain (V/V).

    Raises
    ------
    DesignError
        ``vout`` is zero or not finite, or ``vref`` is not > 0.
    """
    if not (math.isfinite(vout) and vout != 0):
        raise DesignError("operating.vout", vout, "must be a nonzero voltage")
    if not (math.isfinite(vref) and vref > 0):
        raise DesignError("sensing.reference", vref, "must be > 0 V")
    return vref / abs(vout)


def differential_transfer(k: float, bandwidth_hz: float = 0.0, negative_output: bool = True) -> Rational:
    """``-k / (1 + s/(2 pi f_bw))`` (``+k`` for a positive output) as a one-corner :class:`Rational`.

    Parameters
    ----------
    k : float
        Gain magnitude, V/V (> 0).
    negative_output : bool
        True (default) for a negative output: the gain is ``-k``.
    bandwidth_hz : float
        -3 dB frequency of the amplifier, Hz; 0 = no pole.

    Returns
    -------
    Rational
    """
    if not (math.isfinite(k) and k > 0):
        raise DesignError("sensing.gain", k, "must be > 0")
    if not (math.isfinite(bandwidth_hz) and bandwidth_hz >= 0):
        raise DesignError("sensing.diff_bandwidth", format_value(bandwidth_hz, "Hz"), "must be >= 0 (0 = no pole)")
    gain = -k if negative_output else k
    if bandwidth_hz == 0:
        return Rational.constant(gain)
    return Rational.from_factors(gain, num=[], den=[(1.0, 1.0 / (TWO_PI * bandwidth_hz))])


def sensing_transfer(design: Design) -> Rational:
    """Transfer from the converter output to the compensator network's input.

    Parameters
    ----------
    design : Design

    Returns
    -------
    Rational
        One corner: 1 for ``kind = "divider"`` (see the module notes), the
        differential amplifier's ``(vref/vout) / (1 + s/(2 pi f_bw))`` for
        ``kind = "differential"`` (``-k`` for a negative output).
    """
    sensing = design.sensing
    if sensing.kind == "divider":
        return Rational.constant(1.0)
    k = differential_gain(sensing.reference, design.operating.vout)
    return differential_transfer(k, sensing.diff_bandwidth, negative_output=design.operating.vout < 0)
