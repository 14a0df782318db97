"""Digital control: an ADC samples the sensed output, a controller computes the duty, a counter PWM applies it.

The loop, in the controller's own units (ADC codes in, PWM steps out)::

    u_k (PWM steps) --1/N_pwm--> duty --edge, delay tau--> Gvd(s) --H(s)--> sensing --Haa(s)--> ADC 2^b / V_fs --> y_k

- ``N_pwm = pwm_clock / fsw * 2^dither_bits``: PWM steps per switching period (the counter's
  counts, finer by the dithering bits), so the duty is ``u / N_pwm``;
- ``H``: the sensing gain from the output to the ADC input, ``reference / |vout|`` for a divider
  (the ADC sees the reference voltage at the nominal output) or the differential amplifier of
  :mod:`loopkit.networks.sensing` (gain and pole, signed for a negative output);
- ``Haa = 1 / (1 + s / (2 pi f_aa))``: the anti-alias pole (left out when 0);
- ``2^b / V_fs``: ADC codes per volt.

The continuous chain ``Tu(s) = 2^b/V_fs Haa H Gvd / N_pwm`` is sampled exactly with the total loop
delay (:func:`loopkit.sampled.sampled_plant`, ``hold="edge"``): each sample's duty change acts as a
pulse at the modulated edge, the discrete-time small-signal model of D. Maksimovic, R. Zane, IEEE TPEL
22(6), 2007 (from memory), which the switching simulation confirms; a zero-order hold of the duty
(G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems, 3rd ed., 1998, ch. 4)
would add half a sample period of delay that the converter does not have.  That gives ``Tu(z)``; the
loop gain is ``T(z) = Tu(z) C(z)`` with the controller ``C`` (ADC codes of error in, PWM steps
out, positive: ``e = r - y``).

The loop delay
--------------
The ADC samples at the start of a sample period ``Ts = 1 / (sample_ratio fsw)``.  The new duty
is loaded at ``t_load``: ``computation_delay`` after the sample (``update = "immediate"``), or at the
first period start after the computation ends (``"next-period"``, a shadow register:
``t_load = max(1, ceil(computation_delay / Ts)) Ts``).  The edge the carrier modulates lies at
``e = D Ts`` (trailing edge), ``(1 - D) Ts`` (leading edge) or, on average, ``Ts / 2`` (symmetric
triangle) after the period start (the small-signal modulator delays of L. Corradini, D. Maksimovic,
P. Mattavelli, R. Zane, Digital Control of High-Frequency Switched-Mode Power Converters, 2015,
ch. 3, from memory); the first such edge at or after ``t_load`` is the one the new duty moves, so::

    tau = t_load + ((e - t_load) mod Ts)

which is ``D Ts`` for an immediate update with no computation time and ``Ts + D Ts`` for the usual
next-period update (trailing edge).  With ``sample_ratio > 1`` the duty is updated at every sample
(multi-sampled PWM) and the edge positions are taken modulo the sample period: an approximation
(the ripple the ADC then sees is not modelled), said in a finding.
"""

from __future__ import annotations

import math

import numpy as np

from ..design import MIN_PWM_COUNTS
from ..errors import DesignError, Finding
from ..networks.sensing import sensing_transfer
from ..rational import TWO_PI, Rational
from ..sampled import modulator_delay_s, sampled_plant
from ..units import format_value
from .base import SchemeLoop

__all__ = [
    "NAME",
    "TITLE",
    "adc_codes_per_volt",
    "load_time_s",
    "loop_delay_s",
    "pwm_steps",
    "sample_period_s",
    "sensing_gain",
    "uncompensated",
]

NAME = "digital"
TITLE = "digital control"


#: Longest computation delay, in sample periods: the z-domain loop carries one pole per period of delay;
#: a controller that waits longer is better modelled at a lower sampling rate (and leaves fc far below fs).
MAX_DELAY_SAMPLES = 32


def sample_period_s(design) -> float:
    """Ts = 1 / (sample_ratio fsw), s."""
    return 1.0 / (design.stage.fsw * design.digital.sample_ratio)


def pwm_steps(design) -> float:
    """PWM steps per switching period: ``pwm_clock / fsw`` counts, times ``2^dither_bits``."""
    d = design.digital
    return d.pwm_clock / design.stage.fsw * 2.0 ** d.dither_bits


def adc_codes_per_volt(design) -> float:
    """ADC gain, codes per volt at its input: ``2^adc_bits / adc_range``."""
    d = design.digital
    return 2.0 ** d.adc_bits / d.adc_range


def sensing_gain(design) -> Rational:
    """Output to ADC input: ``reference / |vout|`` for a divider, the differential amplifier otherwise.

    Notes
    -----
    A divider has no pole of its own here (the ADC's input is high impedance; its sampling
    capacitor is left out); the differential amplifier is
    :func:`loopkit.networks.sensing.sensing_transfer` (gain ``reference / vout``, signed, and
    its bandwidth pole).
    """
    if design.sensing.kind == "divider":
        return Rational.constant(design.sensing.reference / abs(design.operating.vout))
    return sensing_transfer(design)


def loop_delay_s(design, duty) -> np.ndarray:
    """Total loop delay tau per corner, s: sample to the modulated edge (module notes).

    Parameters
    ----------
    design : Design
    duty : ndarray (corners,)
        Duty cycle per corner.
    """
    d = design.digital
    ts = sample_period_s(design)
    edge = modulator_delay_s(d.carrier, duty, 1.0 / design.stage.fsw)
    t_load = load_time_s(design)
    return t_load + np.mod(edge - t_load, ts)


def load_time_s(design) -> float:
    """``t_load``: from the sample to the compare register's load, s (module notes)."""
    d = design.digital
    if d.update == "immediate":
        return float(d.computation_delay)
    ts = sample_period_s(design)
    return max(1, math.ceil(d.computation_delay / ts - 1e-9)) * ts


def uncompensated(design, stage) -> SchemeLoop:
    """The continuous chain ``Tu(s)`` and its exact sampled form ``Tu(z)`` at every corner (module notes)."""
    d = design.digital
    ts = sample_period_s(design)
    counts = d.pwm_clock / design.stage.fsw
    if counts < MIN_PWM_COUNTS:
        raise DesignError("digital.pwm_clock", format_value(d.pwm_clock, "Hz"),
                          f"gives {counts:.3g} counts per switching period; at least {MIN_PWM_COUNTS}"
                          f" (a clock of {format_value(MIN_PWM_COUNTS * design.stage.fsw, 'Hz')} or more)")
    if d.computation_delay > MAX_DELAY_SAMPLES * ts * (1 + 1e-9):
        raise DesignError("digital.computation_delay", format_value(d.computation_delay, "s"),
                          f"at most {MAX_DELAY_SAMPLES} sample periods ({format_value(MAX_DELAY_SAMPLES * ts, 's')}"
                          f" at fs = {format_value(1.0 / ts, 'Hz')}): a controller that needs longer cannot be"
                          " modelled at this sampling rate; sample less often (a lower fsw or sample_ratio) instead")
    chain = sensing_gain(design) * adc_codes_per_volt(design) / pwm_steps(design)
    if d.anti_alias > 0:
        chain = chain * Rational.from_factors(1.0, (), [(1.0, 1.0 / (TWO_PI * d.anti_alias))])
    chain = chain * stage.gvd
    tau = loop_delay_s(design, stage.duty)
    sampled = sampled_plant(chain, ts, tau, hold="edge")
    n = stage.n_corners
    figures = {"delay_s": tau, "ts_s": np.full(n, ts), "pwm_steps": np.full(n, pwm_steps(design)),
               "adc_codes_per_volt": np.full(n, adc_codes_per_volt(design))}
    findings = []
    if d.sample_ratio > 1:
        findings.append(Finding(
            "multi-sampled", f"sampling {d.sample_ratio} times per switching period: the duty is modelled as"
            " updated at every sample with the edge delay taken within one sample period, and the switching"
            " ripple the ADC sees (aliased into the loop) is not modelled; check on the bench", None, "warning"))
    return SchemeLoop(tu=chain, gvg=stage.gvg, zout=stage.zout, figures=figures, findings=tuple(findings),
                      sampled=sampled)
