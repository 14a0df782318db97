"""What firmware gets from a digital loop: the controller in integers, its margins, the resolution limits.

:func:`realisation` takes the :class:`~loopkit.digital_loop.DigitalLoop` a run made (difference
equation from ADC codes of error to PWM steps, Ts, ADC and PWM scaling, duty range, dc Gvd per
corner) and the sampled uncompensated loop ``Tu(z)``, and gives

* the fixed-point controller (:func:`loopkit.fixedpoint.realise`; word length and Q formats from
  the design's ``digital.word_length`` / ``digital.frac_bits`` or chosen automatically), for the C
  header (:mod:`loopkit.cheader`) and the JSON;
* the margins at every corner with the quantised coefficients beside the exact ones (as the
  E-series parts beside the computed ones of an analog network), and an error finding at each
  corner where quantisation alone breaks a target;
* the resolution limits of A. V. Peterchev and S. R. Sanders, "Quantization resolution and limit
  cycling in digitally controlled PWM converters", IEEE TPEL 18(1), 2003
  (:func:`loopkit.quantisation.check_resolution`): error findings naming the corner, the condition
  and the PWM counts, clock or dither bits that would fix it.

A format the user gave that cannot hold the coefficients or could overflow is an error finding
(naming the field), not a crash: the rest of the result stands.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .discrete import Discrete
from .errors import DesignError, Finding
from .fixedpoint import FixedPointController, adc_error_range, margins_before_after, pwm_limits, realise
from .margins import Margins
from .quantisation import ResolutionCheck, check_resolution
from .verdict import SHOWN_TOLERANCE

__all__ = ["Realisation", "realisation"]


@dataclass(frozen=True, eq=False)
class Realisation:
    """The controller in integers with its margins, and the ADC/PWM resolution check.

    Attributes
    ----------
    fixed : FixedPointController or None
        None where the given format cannot realise the controller (``findings`` says why).
    margins_quantised : Margins or None
        Every corner's margins with the quantised coefficients.
    resolution : ResolutionCheck
    findings : tuple of Finding
    """

    fixed: FixedPointController | None
    margins_quantised: Margins | None
    resolution: ResolutionCheck
    findings: tuple


def realisation(dig, tu: Discrete, f_hz: np.ndarray, pm_target_deg: float, gm_target_db: float,
                fsw_hz: float) -> Realisation:
    """The fixed-point controller, its margins and the resolution limits of a digital loop (module notes)."""
    findings: list[Finding] = []
    resolution = check_resolution(dig.gvd_dc, dig.duty, dig.adc_bits, dig.adc_range_v, np.abs(dig.sensing_gain),
                                  round(dig.pwm_counts), dig.dither_bits, _has_integrator(dig.a), fsw_hz)
    findings.extend(resolution.findings)
    try:
        fixed = realise(dig.b, dig.a, dig.ts_s, adc_error_range(dig.adc_bits),
                        pwm_limits(round(dig.pwm_steps), dig.duty_min, dig.duty_max),
                        word_bits=dig.word_length, frac_bits=dig.frac_bits)
    except DesignError as exc:
        findings.append(Finding("fixed-point", f"no fixed-point controller: {exc}", None, "error"))
        return Realisation(None, None, resolution, tuple(findings))
    _, quantised = margins_before_after(tu, fixed, f_hz)
    for k in range(quantised.pm_deg.shape[0]):
        pm, gm = quantised.pm_deg[k], quantised.gm_db[k]
        if not quantised.stable[k] or pm < pm_target_deg - SHOWN_TOLERANCE or gm < gm_target_db - SHOWN_TOLERANCE:
            findings.append(Finding(
                "fixed-point-margins",
                f"with the coefficients in Q{fixed.b_frac_bits}/Q{fixed.a_frac_bits} ({fixed.word_bits}-bit words)"
                f" the loop has PM {pm:.1f} deg, GM {gm:.1f} dB (stable: {'yes' if quantised.stable[k] else 'no'}),"
                f" below the targets: give digital.word_length = 32 or more fractional bits", k, "error"))
    return Realisation(fixed, quantised, resolution, tuple(findings))


def _has_integrator(a: np.ndarray) -> bool:
    """A pole at z = 1: the denominator's coefficients sum to zero (to rounding)."""
    a = np.asarray(a, float)
    return bool(abs(a.sum()) <= 1e-9 * np.abs(a).sum())
