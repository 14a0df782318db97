"""A digital controller in integer arithmetic: Q formats, overflow bounds, the bit-exact reference model.

The controller is the difference equation (a0 = 1)::

    u[k] = sum_i b_i e[k-i] - sum_{j>=1} a_j u[k-j]

with ``e`` the error in ADC counts (reference minus sample) and ``u`` the
PWM compare value in counts; :meth:`loopkit.discrete.Discrete.difference_equation`
gives ``(b, a)``.  :func:`realise` turns it into integers:

- ``B_i = round(b_i 2^fb)``, ``A_j = round(a_j 2^fa)`` in signed words of
  ``word_bits`` (16 or 32 bits chosen automatically, or given);
- the stored past outputs ``y`` carry ``G`` extra fractional bits (Q``G``
  PWM counts), so an integrator's small steps are not lost to rounding;
- the accumulator (64-bit) holds ``acc = 2^(S-fb) sum B_i e[k-i] - 2^(S-fa-G) sum A_j y[k-j]``
  with ``S = max(fb, fa + G)`` its fractional bits; both scale factors are
  powers of two >= 1, applied by multiplication (never a shift of a negative
  number);
- ``y[k] = rshift(acc, S - G)`` clamped to ``[u_min 2^G, u_max 2^G]`` and
  stored clamped: the anti-windup of a direct form (the past outputs never
  leave the duty range, so the integrator cannot wind up beyond it);
- the PWM gets ``u[k] = rshift(y[k], G)``, inside ``[u_min, u_max]``.

Rounding rule: ``rshift(x, s)`` divides by ``2^s`` and rounds half away from
zero, ``sign(x) floor((|x| + 2^(s-1)) / 2^s)``; it is symmetric, so rounding
adds no offset of its own.  The C header (:mod:`loopkit.cheader`) does exactly
the same with shifts of non-negative numbers only.  The error input is clamped
to ``[e_min, e_max]`` before use (in Python and in C alike).

Overflow: with every stored output clamped and every error clamped, the
largest accumulator magnitude is ``2^(S-fb) sum|B_i| max|e| + 2^(S-fa-G) sum|A_j| max|y|``
(triangle inequality, attained by the worst signs).  :func:`realise` keeps
it below ``2^62`` (so adding the rounding half cannot overflow a signed
64-bit word) and states the bits it needs (``acc_bits``); a user-given
format that breaks it, or coefficients that do not fit the word, is refused
with :class:`DesignError`.

Integrators stay exact: where ``a`` has a root at z = 1 (``sum a = 0``), the
integer ``A`` is corrected by the smallest step that makes ``2^fa + sum A_j = 0``
exactly, so the quantised controller integrates instead of leaking or
drifting.

Form: direct form I, one difference equation.  Measured on the digital Type III
of the sample buck (its own zeros and poles, Tustin-prewarped at fc; 12-bit
ADC, 250 PWM counts; tests/test_fixedpoint.py), largest change of the response
up to fs/2:

=========  ====================  =====================
fs/fc      16-bit coefficients   32-bit coefficients
=========  ====================  =====================
10         0.011 dB, 0.05 deg    2e-7 dB, 1e-6 deg
20         0.028 dB, 0.12 deg    3e-7 dB, 1e-6 deg
100        3.9 dB, 15.6 deg      2e-6 dB, 9e-6 deg
=========  ====================  =====================

So 16 bits serve up to fs/fc of about 20, and at 100 the poles crowd z = 1 and
the automatic choice takes 32 bits, which still leave five orders of magnitude
in hand; a cascade of second-order sections was therefore not needed for these
ratios (it would be for 16-bit words at high ratios).

The choice of ``G`` (automatic): ``ceil(log2(1/|k_i|)) + 4`` where ``k_i = B(1)/A2(1)``
(``A = (1 - z^-1) A2``) is the integrator's step per sample and count of error
(without an integrator the largest ``|b_i|``), clipped to 0..24, so one count of
error moves the stored output by 16 of its LSBs or more (common practice, no
source).  For the rounding of the direct form's stored output see
A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., 2010,
sec. 6.7-6.9 (quantisation in fixed-point implementations, from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .discrete import Discrete, check_sample_time, nyquist_grid
from .errors import DesignError

__all__ = [
    "ACC_LIMIT_BITS",
    "FixedPointController",
    "adc_error_range",
    "margins_before_after",
    "pwm_limits",
    "realise",
    "rshift_round",
]

#: The accumulator's magnitude stays below 2^62 (a signed 64-bit word with room for the rounding half).
ACC_LIMIT_BITS = 62
#: Coefficient words the automatic choice tries, in order (C types int16_t, int32_t).
AUTO_WORDS = (16, 32)
#: Defaults of the automatic choice: the quantised response within these of the exact one up to fs/2.
TOL_DB = 0.05
TOL_DEG = 0.5


def rshift_round(x, s: int):
    """``x / 2^s`` rounded half away from zero, on int64 arrays (the rule the C header uses too)."""
    x = np.asarray(x, dtype=np.int64)
    if s == 0:
        return x.copy()
    half = np.int64(1) << np.int64(s - 1)
    mag = (np.abs(x) + half) >> np.int64(s)
    return np.where(x < 0, -mag, mag)


def adc_error_range(adc_bits: int) -> tuple[int, int]:
    """Error range in counts, ``(-(2^N - 1), 2^N - 1)``: reference and sample both within the ADC's codes."""
    n = _int_in("adc_bits", adc_bits, 1, 24)
    return -(2**n - 1), 2**n - 1


def pwm_limits(pwm_counts: int, min_duty: float, max_duty: float) -> tuple[int, int]:
    """Compare-value limits ``(ceil(min_duty N), floor(max_duty N))`` for a PWM period of ``N`` counts."""
    n = _int_in("pwm_counts", pwm_counts, 2, 2**30)
    lo, hi = float(min_duty), float(max_duty)
    if not (0.0 <= lo < hi <= 1.0):
        raise DesignError("duty limits", (min_duty, max_duty), "0 <= min_duty < max_duty <= 1")
    u_lo, u_hi = math.ceil(lo * n - 1e-9), math.floor(hi * n + 1e-9)
    if u_lo >= u_hi:
        raise DesignError("duty limits", (min_duty, max_duty), f"at least two compare values of {n} counts")
    return u_lo, u_hi


def _int_in(field: str, value, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise DesignError(field, value, f"a whole number from {lo} to {hi}")
    if not lo <= int(value) <= hi:
        raise DesignError(field, value, f"a whole number from {lo} to {hi}")
    return int(value)


def _pair(field: str, value) -> tuple:
    if not isinstance(value, (tuple, list)) or len(value) != 2:
        raise DesignError(field, value, "a pair (lowest, highest) of whole numbers of counts")
    return tuple(value)


def _max_frac(coeffs: np.ndarray, word_bits: int) -> int:
    """The most fractional bits that keep every ``round(c 2^f)`` inside a signed word (may be negative)."""
    big = float(np.max(np.abs(coeffs))) if coeffs.size else 0.0
    if big == 0.0:
        return 62
    limit = 2 ** (word_bits - 1) - 1
    f = word_bits - 1 - math.ceil(math.log2(big)) - 1
    while abs(round(big * 2.0 ** (f + 1))) <= limit and f < 62:
        f += 1
    while f > -64 and abs(round(big * 2.0**f)) > limit:
        f -= 1
    return f


def _round_half_away(x: np.ndarray) -> np.ndarray:
    return np.sign(x) * np.floor(np.abs(x) + 0.5)


@dataclass(frozen=True, eq=False)
class FixedPointController:
    """A controller realised in integers (see the module notes for the arithmetic).

    Attributes
    ----------
    b, a : ndarray
        The exact coefficients (powers of z^-1, ``a[0] = 1``), counts per count.
    b_int, a_int : tuple of int
        ``B_i`` (all of b) and ``A_j`` (a_1 ... a_n; a_0 = 1 is implicit).
    word_bits : int
        Signed coefficient word (the C type is ``int16_t`` up to 16 bits, else ``int32_t``).
    b_frac_bits, a_frac_bits : int
        Q formats of B and A (fractional bits; may be negative for very large coefficients).
    state_frac_bits : int
        Extra fractional bits ``G`` of the stored outputs.
    acc_frac_bits : int
        ``S = max(fb, fa + G)``, the accumulator's fractional bits.
    acc_bits : int
        Bits (sign included) the accumulator needs at worst; <= 63 by construction.
    e_min, e_max, u_min, u_max : int
        Error range (ADC counts; inputs are clamped to it) and output range (PWM counts).
    ts_s : float
        Sample period, s.
    gain_error_db, phase_error_deg : float
        Largest change of the quantised controller's response against the
        exact one on a grid up to fs/2 (magnitude in dB, phase in degrees).
    """

    b: np.ndarray
    a: np.ndarray
    b_int: tuple
    a_int: tuple
    word_bits: int
    b_frac_bits: int
    a_frac_bits: int
    state_frac_bits: int
    acc_frac_bits: int
    acc_bits: int
    e_min: int
    e_max: int
    u_min: int
    u_max: int
    ts_s: float
    gain_error_db: float
    phase_error_deg: float

    # ------------------------------------------------------------------ derived numbers
    @property
    def b_scale(self) -> int:
        """``2^(S - fb)``: multiplies the B sum into the accumulator's format."""
        return 2 ** (self.acc_frac_bits - self.b_frac_bits)

    @property
    def a_scale(self) -> int:
        """``2^(S - fa - G)``: multiplies the A sum into the accumulator's format."""
        return 2 ** (self.acc_frac_bits - self.a_frac_bits - self.state_frac_bits)

    @property
    def y_min(self) -> int:
        return self.u_min * 2**self.state_frac_bits

    @property
    def y_max(self) -> int:
        return self.u_max * 2**self.state_frac_bits

    @property
    def b_quantised(self) -> np.ndarray:
        """The coefficients the integers stand for, ``B_i / 2^fb``."""
        return np.asarray(self.b_int, dtype=float) * 2.0 ** -self.b_frac_bits

    @property
    def a_quantised(self) -> np.ndarray:
        """``[1, A_1 / 2^fa, ...]``."""
        return np.r_[1.0, np.asarray(self.a_int, dtype=float) * 2.0 ** -self.a_frac_bits]

    def exact(self) -> Discrete:
        """The controller before quantisation, as a :class:`Discrete`."""
        return Discrete.from_difference_equation(self.b, self.a, self.ts_s)

    def quantised(self) -> Discrete:
        """The controller with its integer coefficients (no signal rounding), as a :class:`Discrete`."""
        return Discrete.from_difference_equation(self.b_quantised, self.a_quantised, self.ts_s)

    def noise_bound(self, samples: int) -> float:
        """Bound on |u - u_float| over ``samples`` steps without saturation, PWM counts.

        ``u_float`` is the same filter in floating point with the quantised
        coefficients (:meth:`quantised`, e.g. ``scipy.signal.lfilter``), from rest.

        Notes
        -----
        Each step rounds the stored output by at most ``2^-(G+1)`` counts (and the
        ``b`` sum is exact); that error enters the recursion through ``1/A(z)``,
        so after ``k`` steps it is at most ``2^-(G+1) sum_{m<k} |h_m|`` with ``h``
        the impulse response of ``1/A`` (the l1 bound of a linear filter's
        response to a bounded input; Oppenheim & Schafer, Discrete-Time Signal
        Processing, 3rd ed., sec. 6.9, from memory); the output's own rounding
        adds 1/2 count.
        """
        n = _int_in("samples", samples, 1, 10**7)
        impulse = np.zeros(n)
        impulse[0] = 1.0
        from scipy.signal import lfilter  # scipy is a dependency of loopkit

        h = lfilter([1.0], self.a_quantised, impulse)
        return float(2.0 ** -(self.state_frac_bits + 1) * np.sum(np.abs(h)) + 0.5)

    # ------------------------------------------------------------------ the reference model
    def initial_state(self, u_init: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """Past errors (zero) and past stored outputs (``u_init`` clamped, in Q``G``)."""
        y0 = min(max(int(u_init) * 2**self.state_frac_bits, self.y_min), self.y_max)
        return np.zeros(len(self.b_int), dtype=np.int64), np.full(len(self.a_int), y0, dtype=np.int64)

    def run(self, errors, u_init: int = 0) -> np.ndarray:
        """PWM compare values for a sequence of errors, exactly as the C header computes them.

        Parameters
        ----------
        errors : array_like of int, (n,) or (rows, n)
            Errors in ADC counts, one row per independent run (vectorised over
            rows); clamped to ``[e_min, e_max]`` as in C.
        u_init : int
            Starting value of the stored past outputs, PWM counts (clamped to the limits).

        Returns
        -------
        ndarray of int64, same shape as ``errors``
        """
        arr = np.asarray(errors)
        if arr.dtype.kind == "f":
            if not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
                raise DesignError("errors", "not whole numbers", "errors in whole ADC counts")
        elif arr.dtype.kind not in "iu":
            raise DesignError("errors", str(arr.dtype), "errors in whole ADC counts (integers)")
        if arr.size and (arr.max() > 2**31 - 1 or arr.min() < -(2**31) + 1):
            raise DesignError("errors", "beyond 32 bits", "errors within a signed 32-bit integer")
        if arr.ndim not in (1, 2):
            raise DesignError("errors", f"shape {arr.shape}", "a sequence (n,) or rows of sequences (rows, n)")
        e_all = np.clip(np.atleast_2d(arr).astype(np.int64), self.e_min, self.e_max)
        rows, n = e_all.shape
        if rows == 1:
            out1 = np.array(self._run_one(e_all[0].tolist(), u_init), dtype=np.int64)
            return out1 if arr.ndim == 1 else out1[None, :]
        step = self.rows_stepper(np.full(rows, u_init))
        out = np.empty((rows, n), dtype=np.int64)
        for k in range(n):
            out[:, k] = step(e_all[:, k])
        return out[0] if arr.ndim == 1 else out

    def rows_stepper(self, u_init):
        """A function ``step(e) -> u`` for many independent rows at once (int64 arrays (rows,)), holding their
        state: the arithmetic of :meth:`stepper`, vectorised, for closed-loop simulations of many lanes.

        ``u_init`` (rows,): each row's starting stored output, PWM counts (clamped to the limits).
        """
        u0 = np.atleast_1d(np.asarray(u_init, dtype=np.int64))
        e_hist = np.zeros((u0.size, len(self.b_int)), dtype=np.int64)
        y0 = np.clip(u0 * 2**self.state_frac_bits, self.y_min, self.y_max)
        y_hist = np.repeat(y0[:, None], len(self.a_int), axis=1)
        bi = np.asarray(self.b_int, dtype=np.int64)
        ai = np.asarray(self.a_int, dtype=np.int64)
        bs, as_ = np.int64(self.b_scale), np.int64(self.a_scale)
        shift = self.acc_frac_bits - self.state_frac_bits

        def step(e) -> np.ndarray:
            e_hist[:, 1:] = e_hist[:, :-1]
            e_hist[:, 0] = np.clip(np.asarray(e, dtype=np.int64), self.e_min, self.e_max)
            acc = (e_hist @ bi) * bs
            if ai.size:
                acc = acc - (y_hist @ ai) * as_
            y = np.clip(rshift_round(acc, shift), self.y_min, self.y_max)
            if ai.size:
                y_hist[:, 1:] = y_hist[:, :-1]
                y_hist[:, 0] = y
            return rshift_round(y, self.state_frac_bits)

        return step

    def _run_one(self, errors: list, u_init: int) -> list:
        """One run in Python integers (the same arithmetic as the rows of :meth:`run`; several times faster)."""
        step = self.stepper(u_init)
        return [step(e) for e in errors]

    def stepper(self, u_init: int = 0):
        """A function ``step(e) -> u`` holding its own state: one sample at a time, for closed-loop simulations.

        The same arithmetic as :meth:`run` (errors clamped to the range; no type check, for speed:
        pass Python or numpy integers).
        """
        e0, y0 = self.initial_state(u_init)
        e_hist, y_hist = [int(v) for v in e0], [int(v) for v in y0]
        bi, ai = list(self.b_int), list(self.a_int)
        bs, as_ = self.b_scale, self.a_scale
        shift, g = self.acc_frac_bits - self.state_frac_bits, self.state_frac_bits
        y_lo, y_hi, e_lo, e_hi = self.y_min, self.y_max, self.e_min, self.e_max

        def step(e) -> int:
            nonlocal e_hist, y_hist
            e_hist = [min(max(int(e), e_lo), e_hi)] + e_hist[:-1]
            acc = sum(c * v for c, v in zip(bi, e_hist)) * bs - sum(c * v for c, v in zip(ai, y_hist)) * as_
            y = min(max(_rshift_round_int(acc, shift), y_lo), y_hi)
            if ai:
                y_hist = [y] + y_hist[:-1]
            return _rshift_round_int(y, g)

        return step


def _rshift_round_int(x: int, s: int) -> int:
    if s == 0:
        return x
    mag = (abs(x) + (1 << (s - 1))) >> s
    return -mag if x < 0 else mag


def _response_error(b, a, bq, aq, ts: float) -> tuple[float, float]:
    """Largest |dB| and |deg| difference of bq/aq against b/a on a grid up to fs/2 (direct polynomial evaluation)."""
    f = nyquist_grid(ts, 1e-5 / ts, 400)
    zi = np.exp(-2j * np.pi * f * ts)  # z^-1

    def h(num, den):
        return np.polyval(np.asarray(num)[::-1], zi) / np.polyval(np.asarray(den)[::-1], zi)

    exact, quant = h(b, a), h(bq, aq)
    # where the exact response is zero on the unit circle (a Tustin zero at fs/2) a ratio means nothing
    keep = np.isfinite(exact) & (np.abs(exact) > 1e-9 * np.max(np.abs(exact[np.isfinite(exact)]), initial=0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = quant[keep] / exact[keep]
    ratio = ratio[np.isfinite(ratio) & (ratio != 0)]
    if ratio.size == 0:
        return 0.0, 0.0
    return float(np.max(np.abs(20 * np.log10(np.abs(ratio))))), float(np.max(np.abs(np.degrees(np.angle(ratio)))))


def _integerise(b, a, fb: int, fa: int, word_bits: int, integrator: bool) -> tuple[np.ndarray, np.ndarray]:
    limit = 2 ** (word_bits - 1) - 1
    bf, af = _round_half_away(b * 2.0**fb), _round_half_away(a[1:] * 2.0**fa)
    if np.any(np.abs(bf) > limit) or np.any(np.abs(af) > limit):  # checked before the cast, which would wrap
        raise DesignError("frac_bits", (fb, fa), f"coefficients that fit a signed {word_bits}-bit word")
    bi, ai = bf.astype(np.int64), af.astype(np.int64)
    if integrator and ai.size:
        residual = int(2**fa + ai.sum()) if fa >= 0 else 0
        if residual:
            exact = a[1:] * 2.0**fa
            trial = [abs(ai[j] - residual - exact[j]) for j in range(ai.size)]
            j = int(np.argmin(trial))
            ai[j] -= residual
    if np.any(np.abs(bi) > limit) or np.any(np.abs(ai) > limit):
        raise DesignError("frac_bits", (fb, fa), f"coefficients that fit a signed {word_bits}-bit word")
    return bi, ai


def _acc_bits(bi, ai, fb, fa, g, e_abs, u_abs) -> tuple[int, int, int]:
    s = max(fb, fa + g)
    worst = (2 ** (s - fb)) * int(np.abs(bi).sum()) * e_abs + (2 ** (s - fa - g)) * int(np.abs(ai).sum()) * u_abs * 2**g
    return s, worst, max(worst, 1).bit_length() + 1


def realise(b, a, ts_s, e_range: tuple[int, int], u_range: tuple[int, int], word_bits: int | None = None,
            frac_bits=None, state_frac_bits: int | None = None, tol_db: float = TOL_DB,
            tol_deg: float = TOL_DEG) -> FixedPointController:
    """Realise ``u[k] = sum b_i e[k-i] - sum a_j u[k-j]`` in integers (module notes).

    Parameters
    ----------
    b, a : array_like
        Coefficients in powers of z^-1 (``a[0] != 0``; normalised to 1), from
        error counts to PWM counts (:meth:`Discrete.difference_equation`).
    ts_s : float
        Sample period, s.
    e_range : (int, int)
        Error range in ADC counts (:func:`adc_error_range`).
    u_range : (int, int)
        Output limits in PWM counts (:func:`pwm_limits`).
    word_bits : int, optional
        Signed coefficient word, 8 ... 32 bits; by default the first of 16, 32
        whose response stays within ``tol_db``/``tol_deg`` of the exact one.
    frac_bits : int or (int, int), optional
        Fractional bits of B and A (one number for both); by default the most
        that fit the word (and keep the accumulator below 2^62).
    state_frac_bits : int, optional
        Extra fractional bits ``G`` of the stored outputs, 0 ... 30 (default: module notes).
    tol_db, tol_deg : float
        Accuracy the automatic word choice asks for.

    Returns
    -------
    FixedPointController

    Raises
    ------
    DesignError
        Bad coefficients or ranges; a given format whose coefficients do not fit
        the word, or whose accumulator could exceed 2^62 (overflow is refused,
        never wrapped).
    """
    ts = check_sample_time(ts_s)
    b = np.atleast_1d(np.asarray(b, dtype=float))
    a = np.atleast_1d(np.asarray(a, dtype=float))
    if b.ndim != 1 or a.ndim != 1 or b.size == 0 or a.size == 0 or not (np.all(np.isfinite(b)) and np.all(np.isfinite(a))):
        raise DesignError("b, a", (b.tolist(), a.tolist()), "finite coefficient lists in powers of z^-1")
    if a[0] == 0:
        raise DesignError("a", a.tolist(), "a[0] must be nonzero (a causal filter)")
    b, a = b / a[0], a / a[0]
    e_min, e_max = (_int_in("e_range", v, -(2**31) + 1, 2**31 - 1) for v in _pair("e_range", e_range))
    u_min, u_max = (_int_in("u_range", v, -(2**31) + 1, 2**31 - 1) for v in _pair("u_range", u_range))
    if e_min > e_max:
        raise DesignError("e_range", e_range, "(e_min, e_max) with e_min <= e_max, ADC counts")
    if u_min >= u_max:
        raise DesignError("u_range", u_range, "(u_min, u_max) with u_min < u_max, PWM counts")
    integrator = a.size > 1 and abs(a.sum()) <= 1e-9 * np.abs(a).sum()
    if state_frac_bits is None:
        # the integrator's step per count of error: B(1) / A2(1) with A = (1 - z^-1) A2, A2(1) = -sum j a_j
        ki = abs(float(b.sum()) / float(-np.dot(np.arange(a.size), a))) if integrator else float(np.max(np.abs(b)))
        g = 24 if ki == 0 else int(np.clip(math.ceil(math.log2(1.0 / ki)) + 4, 0, 24))
    else:
        g = _int_in("state_frac_bits", state_frac_bits, 0, 30)
    words = AUTO_WORDS if word_bits is None else (_int_in("word_bits", word_bits, 8, 32),)
    if frac_bits is None:
        given = None
    elif isinstance(frac_bits, (tuple, list)) and len(frac_bits) == 2:
        given = tuple(_int_in("frac_bits", v, -32, 62) for v in frac_bits)
    else:
        given = (_int_in("frac_bits", frac_bits, -32, 62),) * 2
    best, refused = None, None
    for w in words:
        try:
            best = _realise_word(b, a, ts, w, given, g, integrator, (e_min, e_max), (u_min, u_max))
        except DesignError as exc:  # a given format that does not fit this word (or overflows)
            refused = exc
            continue
        if best.gain_error_db <= tol_db and best.phase_error_deg <= tol_deg:
            break
    if best is None:
        raise refused
    return best


def _realise_word(b, a, ts, w, given, g, integrator, e_range, u_range) -> FixedPointController:
    """One coefficient word: the Q formats (given, or the most that fit and keep the accumulator bounded)."""
    e_abs, u_abs = max(abs(v) for v in e_range), max(abs(v) for v in u_range)
    if given is None:
        fb, fa = _max_frac(b, w), min(_max_frac(a[1:], w), 62 - g)
    else:
        fb, fa = given
    for _ in range(200):
        try:
            bi, ai = _integerise(b, a, fb, fa, w, integrator)
        except DesignError:
            if given is not None:
                raise
            fb, fa = fb - 1, fa - 1  # the integrator's correction pushed a coefficient past the word
            continue
        s, worst, acc_bits = _acc_bits(bi, ai, fb, fa, g, e_abs, u_abs)
        if worst < 2**ACC_LIMIT_BITS:
            break
        if given is not None:
            raise DesignError("frac_bits", given if given[0] != given[1] else given[0],
                              f"a format whose worst-case accumulator ({acc_bits} bits) stays below "
                              f"{ACC_LIMIT_BITS + 1} bits: fewer fractional bits, smaller ranges or state_frac_bits")
        fb, fa = fb - 1, fa - 1
    else:  # pragma: no cover - 200 halvings leave every coefficient zero
        raise DesignError("b, a", (b.tolist(), a.tolist()), "coefficients a fixed-point format can hold")
    bq = bi * 2.0**-fb
    aq = np.r_[1.0, ai * 2.0**-fa]
    gain_err, phase_err = _response_error(b, a, bq, aq, ts)
    return FixedPointController(b, a, tuple(int(v) for v in bi), tuple(int(v) for v in ai), w, fb, fa, g, s,
                                acc_bits, *e_range, *u_range, ts, gain_err, phase_err)


def margins_before_after(plant: Discrete, controller: FixedPointController, f_hz):
    """Margins of ``plant x controller`` with the exact and with the quantised coefficients.

    Parameters
    ----------
    plant : Discrete
        The sampled loop without the controller, from PWM counts to error
        counts (sign convention ``1 + T``), one row per corner.
    controller : FixedPointController
    f_hz : ndarray
        Frequency grid ending at fs/2 (:func:`loopkit.discrete.nyquist_grid`).

    Returns
    -------
    (Margins, Margins)
        Before and after quantisation (:func:`loopkit.discrete_margins.discrete_loop_margins`),
        like the exact and the snapped parts of an analog design.
    """
    from .discrete_margins import discrete_loop_margins

    return (discrete_loop_margins(plant * controller.exact(), f_hz),
            discrete_loop_margins(plant * controller.quantised(), f_hz))
