"""Resolution limits of a digitally controlled converter: when the ADC and the PWM make the output hunt.

A digital loop settles only if some PWM level puts the output inside the
ADC's zero-error bin; otherwise it hunts between levels for ever (a limit
cycle).  A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit
cycling in digitally controlled PWM converters", IEEE Trans. Power
Electronics 18(1), 301-308, 2003 ([PS03]), sec. III, give conditions for no
limit cycle; this module checks two of them per operating corner:

(a) the PWM's output-voltage step finer than the ADC's LSB referred to the output::

        dV_pwm = |dVo/dD| / (N_pwm 2^dither)   <   dV_adc = (V_adc / 2^n_adc) / H

    ``|dVo/dD|`` is the stage's DC control-to-output gain (V per unit duty;
    ``Vg`` for a buck, ``Vg / D'^2`` for an ideal boost), ``N_pwm`` the PWM
    counts per period (PWM clock / fsw), ``dither`` the bits of duty dither
    (each doubles the effective resolution, [PS03] sec. IV), ``H`` the sensing
    gain from the output to the ADC input;
(b) integral action in the control law (a DC solution inside the zero-error
    bin is then reached whenever one exists).

Their third condition bounds the integral gain; it is not checked here: its
exact form was not available to re-read, and a bound from memory would be a
check without a source.  The equations above are [PS03]'s, recalled (not
re-read; equation numbers therefore not cited): the buck form ``dV_pwm = Vg /
2^n_dpwm`` is confirmed by the worked example of Control Circuits in Power
Electronics (IET), ch. 4, fig. 4.6, read in a stored page: the levels are
``q_D Vg`` apart and limit cycles appear when that exceeds the A/D bin.  The
general ``|dVo/dD|`` form is the same argument for any stage (the output moves
by its DC gain times the duty step).

A corner that breaks (a) gets an error :class:`~loopkit.errors.Finding`
naming the two steps and what would fix it: the PWM counts (bits, and the PWM
clock at the given switching frequency) or the dither bits needed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import DesignError, Finding
from .units import format_value

__all__ = ["ResolutionCheck", "check_resolution"]


@dataclass(frozen=True, eq=False)
class ResolutionCheck:
    """Per-corner resolution figures and findings.

    Attributes
    ----------
    dv_pwm_v : ndarray (corners,)
        Output-voltage step of one effective PWM step (dither included), V.
    dv_adc_v : ndarray (corners,)
        ADC LSB referred to the output, V.
    fine_enough : ndarray of bool (corners,)
        Condition (a) holds: ``dv_pwm_v < dv_adc_v``.
    pwm_counts_needed : ndarray of int (corners,)
        Fewest PWM counts per period for (a) with the given dither bits.
    pwm_bits_needed : ndarray of int (corners,)
        ``ceil(log2(pwm_counts_needed))``.
    pwm_clock_needed_hz : ndarray (corners,)
        ``pwm_counts_needed x fsw`` (NaN when no switching frequency was given).
    dither_bits_needed : ndarray of int (corners,)
        Fewest dither bits for (a) with the given PWM counts.
    has_integrator : bool
        Condition (b).
    findings : tuple of Finding
        Severity ``"error"`` for each corner that breaks (a) and, once, for (b).
    """

    dv_pwm_v: np.ndarray
    dv_adc_v: np.ndarray
    fine_enough: np.ndarray
    pwm_counts_needed: np.ndarray
    pwm_bits_needed: np.ndarray
    pwm_clock_needed_hz: np.ndarray
    dither_bits_needed: np.ndarray
    has_integrator: bool
    findings: tuple


def _whole(field: str, value, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not lo <= int(value) <= hi:
        raise DesignError(field, value, f"a whole number from {lo} to {hi}")
    return int(value)


def _positive(field: str, value, n: int) -> np.ndarray:
    try:
        arr = np.broadcast_to(np.asarray(value, dtype=float), (n,))
    except (TypeError, ValueError):
        raise DesignError(field, value, f"a number > 0 or one per corner ({n})") from None
    if not np.all(np.isfinite(arr)) or np.any(arr <= 0):
        raise DesignError(field, value, "finite and > 0")
    return arr


def check_resolution(gvd_dc, duty, adc_bits: int, adc_range_v, sensing_gain, pwm_counts: int,
                     dither_bits: int = 0, has_integrator: bool = True, fsw_hz=None) -> ResolutionCheck:
    """Check [PS03]'s conditions (a) and (b) at every corner (module notes).

    Parameters
    ----------
    gvd_dc : array_like (corners,)
        DC control-to-output gain ``dVo/dD`` per corner, V per unit duty (sign ignored).
    duty : array_like (corners,)
        Duty cycle per corner (0 < D < 1), named in the findings.
    adc_bits : int
        ADC resolution, 1 ... 24 bits.
    adc_range_v : float
        ADC full-scale input range, V.
    sensing_gain : float or array_like (corners,)
        Output voltage to ADC input (divider or differential amplifier), V/V.
    pwm_counts : int
        PWM counts per switching period (PWM clock / fsw), >= 2.
    dither_bits : int
        Bits of duty dither, 0 ... 16.
    has_integrator : bool
        Whether the control law integrates.
    fsw_hz : float, optional
        Switching (PWM) frequency, for the PWM clock a fix would need.

    Returns
    -------
    ResolutionCheck
    """
    g = np.abs(np.atleast_1d(np.asarray(gvd_dc, dtype=float)))
    if g.ndim != 1 or not np.all(np.isfinite(g)) or np.any(g == 0):
        raise DesignError("gvd_dc", gvd_dc, "a finite, nonzero DC gain per corner, V per unit duty")
    n = g.size
    d = np.atleast_1d(np.asarray(duty, dtype=float))
    if d.shape != (n,) or not np.all((d > 0) & (d < 1)):
        raise DesignError("duty", duty, f"one duty cycle per corner ({n}), each between 0 and 1")
    nb = _whole("adc_bits", adc_bits, 1, 24)
    v_adc = float(_positive("adc_range_v", adc_range_v, 1)[0])
    h = _positive("sensing_gain", sensing_gain, n)
    counts = _whole("pwm_counts", pwm_counts, 2, 2**32)
    dither = _whole("dither_bits", dither_bits, 0, 16)
    if not isinstance(has_integrator, (bool, np.bool_)):
        raise DesignError("has_integrator", has_integrator, "True or False")
    fsw = np.nan if fsw_hz is None else float(_positive("fsw_hz", fsw_hz, 1)[0])

    dv_adc = np.broadcast_to(v_adc / 2.0**nb, (n,)) / h
    dv_pwm = g / (counts * 2.0**dither)
    fine = dv_pwm < dv_adc
    # smallest N with g / (N 2^dither) < dv_adc, and smallest dither d with g / (counts 2^d) < dv_adc
    ratio = g / dv_adc
    need_counts = np.floor(ratio / 2.0**dither).astype(np.int64) + 1
    need_bits = np.ceil(np.log2(need_counts)).astype(np.int64)
    need_dither = np.maximum(np.floor(np.log2(ratio / counts)).astype(np.int64) + 1, 0)
    clock = need_counts * fsw

    findings = []
    for k in np.nonzero(~fine)[0]:
        clock_text = "" if np.isnan(fsw) else f", a PWM clock of {format_value(clock[k], 'Hz')} at {format_value(fsw, 'Hz')}"
        findings.append(Finding(
            "pwm-coarser-than-adc",
            f"at D = {d[k]:.3f} one PWM step moves the output by {format_value(dv_pwm[k], 'V')} "
            f"({counts} counts{f' x {2**dither} dither' if dither else ''}), more than the ADC's LSB referred to "
            f"the output ({format_value(dv_adc[k], 'V')}): the output will hunt between PWM levels (a limit cycle). "
            f"Needs at least {need_counts[k]} PWM counts per period ({need_bits[k]} bits{clock_text}) "
            f"or {need_dither[k]} dither bit{'' if need_dither[k] == 1 else 's'}, or a coarser ADC step (Peterchev & Sanders 2003)",
            int(k), "error"))
    if not has_integrator:
        findings.append(Finding(
            "no-integral-action",
            "the control law has no integrator: the output settles where a PWM level puts it, not inside the "
            "ADC's zero-error bin, and may hunt between levels; add integral action (Peterchev & Sanders 2003)",
            None, "error"))
    return ResolutionCheck(dv_pwm, dv_adc, fine, need_counts, need_bits, clock, need_dither, bool(has_integrator),
                           tuple(findings))
