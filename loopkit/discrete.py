"""Factored z-domain transfer functions, vectorised over operating corners.

The sampled twin of :class:`loopkit.rational.Rational`.  A :class:`Discrete`
holds, for every corner, a real gain and two lists of first-order factors
``a0 + a1 z`` (numerator and denominator), and one sample period ``ts_s``
shared by all corners::

    H(z) = gain * prod(a0_i + a1_i z) / prod(b0_j + b1_j z),   z = exp(j 2 pi f Ts)

Complex roots appear as conjugate pairs of complex factors; a missing factor
(padding, so that corners with fewer roots fit one array) is ``(1, 0)``.  A
delay of ``l`` samples is ``l`` poles at the origin (factor ``(0, 1)``).

Normalisation.  A root ``r`` inside or on the unit circle is stored monic,
``(-r, 1)`` (that is ``z - r``); a root outside it as ``(1, -1/r)`` (that is
``1 - z/r``), which also covers the padding (a root at infinity).  Rational
normalises every factor to ``(1, a1)`` because in s a factor moves along a
straight line that never circles the origin; in z a factor moves on a circle
and ``z - r`` winds once around the origin per period when ``|r| < 1``.  The
split makes each factor's angle continuous in frequency without unwrapping:

- inside: ``angle(z - r) = theta + angle(1 - r/z)``, and ``1 - r/z`` has a
  positive real part for ``|r| < 1`` (for ``|r| = 1`` the angle jumps by pi
  only where the factor is zero);
- outside: ``angle(1 - z/r)``, and ``1 - z/r`` has a positive real part.

So, as in Rational, the phase is the sum of the factor angles; at f = 0 every
real root and every conjugate pair contributes 0, a positive gain reads 0 deg
and a negative gain -180 deg, and each root at z = 1 adds +-90 deg just above
f = 0 (a digital integrator reads -90 deg, like 1/s).  A pole at the origin
adds ``-theta = -2 pi f Ts``: a one-sample delay.  Every frequency exposed by
this module is in hertz; z-plane roots are dimensionless.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import DesignError
from .rational import TWO_PI, _polished_factors, _poly_from_factors

__all__ = ["Discrete", "check_sample_time", "nyquist_grid"]

_PAD = np.array([1.0 + 0j, 0.0 + 0j])


def check_sample_time(ts_s) -> float:
    """``ts_s`` as a float, or :class:`DesignError` unless it is finite and > 0 (it has no default)."""
    if ts_s is None:
        raise DesignError("ts_s", "missing", "the sample period must be given, in seconds > 0")
    try:
        ts = float(ts_s)
    except (TypeError, ValueError):
        raise DesignError("ts_s", ts_s, "the sample period must be a number of seconds > 0") from None
    if not np.isfinite(ts) or ts <= 0:
        raise DesignError("ts_s", ts_s, "the sample period must be a number of seconds > 0")
    return ts


def nyquist_grid(ts_s, f_lo_hz: float, points: int = 1000) -> np.ndarray:
    """Log-spaced frequencies from ``f_lo_hz`` to exactly the Nyquist frequency ``0.5 / ts_s``, Hz."""
    ts = check_sample_time(ts_s)
    f_lo = float(f_lo_hz)
    if not (np.isfinite(f_lo) and 0 < f_lo < 0.5 / ts):
        raise DesignError("f_lo_hz", f_lo_hz, f"a frequency between 0 and fs/2 = {0.5 / ts:g} Hz")
    f = np.geomspace(f_lo, 0.5 / ts, int(points))
    f[-1] = 0.5 / ts
    return f


def _as_factor_array(factors, n: int) -> np.ndarray:
    arr = np.asarray(factors, dtype=complex)
    if arr.size == 0:
        return np.zeros((n, 0, 2), dtype=complex)
    if arr.ndim == 2:
        arr = np.broadcast_to(arr, (n,) + arr.shape)
    if arr.ndim != 3 or arr.shape[-1] != 2:
        raise ValueError(f"factor array must be (corners, k, 2), got shape {arr.shape}")
    return np.broadcast_to(arr, (n,) + arr.shape[1:])


def _normalise(factors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Factors scaled to ``(-r, 1)`` for ``|r| <= 1`` and ``(1, -1/r)`` otherwise; returns (scale, factors)."""
    a0, a1 = factors[..., 0], factors[..., 1]
    if np.any((a0 == 0) & (a1 == 0)):
        raise ValueError("a factor 0 + 0 z is not allowed")
    inside = np.abs(a0) <= np.abs(a1)  # |r| = |a0/a1| <= 1
    lead = np.where(inside, a1, a0)
    out = np.empty_like(factors)
    safe = np.where(lead == 0, 1.0, lead)
    out[..., 0] = np.where(inside, a0 / safe, 1.0)
    out[..., 1] = np.where(inside, 1.0, a1 / safe)
    return np.prod(lead, axis=-1), out


def _factor_angles(f: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Continuous angles (rad) of factors ``f`` (n, k, 2) at ``theta`` (n or 1, nf): (n, k, nf)."""
    a0, a1 = f[..., 0, None], f[..., 1, None]
    th = theta[:, None, :]
    inside = a1 == 1  # monic: a root on or inside the unit circle (outside factors have |a1| < 1)
    zi = np.exp(-1j * th)
    z = np.exp(1j * th)
    return np.where(inside, th + np.angle(1.0 + a0 * zi), np.angle(a0 + a1 * z))


@dataclass(frozen=True, eq=False)
class Discrete:
    """A sampled transfer function per corner, in factored form (see the module notes).

    Attributes
    ----------
    gain : ndarray (n,)
        Real gain multiplying the normalised factors.
    num, den : ndarray (n, k, 2) complex
        Factors ``a0 + a1 z``, normalised as in the module notes.
    ts_s : float
        Sample period, s (the same for every corner).
    """

    gain: np.ndarray
    num: np.ndarray
    den: np.ndarray
    ts_s: float

    # ------------------------------------------------------------------ constructors
    @classmethod
    def from_factors(cls, gain, num=(), den=(), ts_s=None) -> Discrete:
        """Build from a gain and factor lists ``[(a0, a1), ...]`` meaning ``a0 + a1 z`` (any scaling).

        ``gain`` may be a scalar or an array over corners; factor arrays may be
        (k, 2) for all corners or (n, k, 2).
        """
        ts = check_sample_time(ts_s)
        g = np.atleast_1d(np.asarray(gain, dtype=float))
        shapes = [g.shape[0]] + [np.asarray(f).shape[0] for f in (num, den) if np.asarray(f).ndim == 3]
        n = max(shapes)
        g = np.broadcast_to(g, (n,)).astype(float)
        gn, nf = _normalise(_as_factor_array(num, n))
        gd, df = _normalise(_as_factor_array(den, n))
        ratio = gn / gd
        if np.any(np.abs(ratio.imag) > 1e-9 * np.abs(ratio)):
            raise ValueError("complex factors must come in conjugate pairs")
        return cls(g * ratio.real, nf, df, ts)

    @classmethod
    def from_roots(cls, gain, zeros=(), poles=(), ts_s=None) -> Discrete:
        """``gain * prod(z - zeros) / prod(z - poles)`` (zpk form; z-plane roots, ``inf`` = padding).

        ``zeros`` and ``poles`` are (k,) for every corner or (n, k).
        """

        def fac(r):
            r = np.asarray(r, dtype=complex)
            if r.size == 0:
                return ()
            out = np.empty(r.shape + (2,), dtype=complex)
            finite = np.isfinite(r)
            out[..., 0] = np.where(finite, -np.where(finite, r, 0), 1.0)
            out[..., 1] = np.where(finite, 1.0, 0.0)
            return out

        return cls.from_factors(gain, fac(zeros), fac(poles), ts_s)

    @classmethod
    def from_polys(cls, num, den, ts_s=None) -> Discrete:
        """Build from ascending real polynomial coefficients in z, shape (n, k) or (k,)."""
        ts = check_sample_time(ts_s)
        num = np.atleast_2d(np.asarray(num, dtype=float))
        den = np.atleast_2d(np.asarray(den, dtype=float))
        n = max(num.shape[0], den.shape[0])
        gn, fn = _polished_factors(np.broadcast_to(num, (n, num.shape[1])))
        gd, fd = _polished_factors(np.broadcast_to(den, (n, den.shape[1])))
        sn, fn = _normalise(fn)
        sd, fd = _normalise(fd)
        return cls(gn / gd * (sn / sd).real, fn, fd, ts)

    @classmethod
    def from_difference_equation(cls, b, a, ts_s=None) -> Discrete:
        """The filter ``sum_i a_i y[k-i] = sum_i b_i x[k-i]`` (scipy ``lfilter`` convention).

        ``b`` and ``a`` are coefficients of powers of ``z^-1`` (``a[0] != 0``),
        shape (m,) or (n, m).
        """
        b = np.atleast_2d(np.asarray(b, dtype=float))
        a = np.atleast_2d(np.asarray(a, dtype=float))
        if np.any(a[:, 0] == 0):
            raise DesignError("a", a[:, 0].tolist(), "a[0] must be nonzero (a causal filter)")
        m = max(b.shape[1], a.shape[1])
        bp = np.zeros((b.shape[0], m))
        ap = np.zeros((a.shape[0], m))
        bp[:, : b.shape[1]] = b
        ap[:, : a.shape[1]] = a
        # multiply by z^(m-1): the coefficient of z^(m-1-i) is b_i, so ascending order is reversed
        return cls.from_polys(bp[:, ::-1], ap[:, ::-1], ts_s)

    @classmethod
    def constant(cls, value, ts_s, n: int | None = None) -> Discrete:
        v = np.atleast_1d(np.asarray(value, dtype=float))
        if n is not None:
            v = np.broadcast_to(v, (n,))
        empty = np.zeros((v.shape[0], 0, 2), dtype=complex)
        return cls(v.astype(float), empty, empty.copy(), check_sample_time(ts_s))

    @classmethod
    def delay(cls, samples, ts_s) -> Discrete:
        """``z^-l`` per corner (``samples`` a non-negative integer or an array of them)."""
        l_arr = np.atleast_1d(np.asarray(samples))
        if np.any(l_arr < 0) or np.any(l_arr != np.round(l_arr)):
            raise DesignError("samples", samples, "a delay in whole samples >= 0")
        l_arr = l_arr.astype(int)
        k = int(l_arr.max()) if l_arr.size else 0
        den = np.broadcast_to(_PAD, (l_arr.size, k, 2)).copy()
        den[np.arange(k)[None, :] < l_arr[:, None]] = (0.0, 1.0)
        return cls(np.ones(l_arr.size), np.zeros((l_arr.size, 0, 2), complex), den, check_sample_time(ts_s))

    # ------------------------------------------------------------------ algebra
    @property
    def n_corners(self) -> int:
        return self.gain.shape[0]

    def broadcast(self, n: int) -> Discrete:
        if self.n_corners == n:
            return self
        if self.n_corners != 1:
            raise ValueError(f"cannot broadcast {self.n_corners} corners to {n}")
        return Discrete(np.broadcast_to(self.gain, (n,)).copy(),
                        np.broadcast_to(self.num, (n,) + self.num.shape[1:]).copy(),
                        np.broadcast_to(self.den, (n,) + self.den.shape[1:]).copy(), self.ts_s)

    def __mul__(self, other) -> Discrete:
        if not isinstance(other, Discrete):
            return Discrete(self.gain * np.asarray(other, dtype=float), self.num, self.den, self.ts_s)
        if not np.isclose(self.ts_s, other.ts_s, rtol=1e-12, atol=0):
            raise ValueError(f"Discrete product: sample periods differ ({self.ts_s} s, {other.ts_s} s)")
        n = max(self.n_corners, other.n_corners)
        a, b = self.broadcast(n), other.broadcast(n)
        return Discrete(a.gain * b.gain, np.concatenate([a.num, b.num], axis=1),
                        np.concatenate([a.den, b.den], axis=1), self.ts_s)

    __rmul__ = __mul__

    def inverse(self) -> Discrete:
        return Discrete(1.0 / self.gain, self.den, self.num, self.ts_s)

    def __truediv__(self, other) -> Discrete:
        if not isinstance(other, Discrete):
            return self * (1.0 / np.asarray(other, dtype=float))
        return self * other.inverse()

    def __neg__(self) -> Discrete:
        return Discrete(-self.gain, self.num, self.den, self.ts_s)

    def take(self, index) -> Discrete:
        """The corners selected by ``index`` (int, slice, mask or index array)."""
        idx = np.atleast_1d(np.arange(self.n_corners)[index])
        return Discrete(self.gain[idx], self.num[idx], self.den[idx], self.ts_s)

    @staticmethod
    def stack(parts: list[Discrete], order: np.ndarray | None = None) -> Discrete:
        """Concatenate corners of several Discretes (padding factor lists); ``order`` as in Rational."""
        kz = max(p.num.shape[1] for p in parts)
        kp = max(p.den.shape[1] for p in parts)

        def pad(f, k):
            extra = np.broadcast_to(_PAD, (f.shape[0], k - f.shape[1], 2))
            return np.concatenate([f, extra], axis=1)

        out = Discrete(np.concatenate([p.gain for p in parts]), np.concatenate([pad(p.num, kz) for p in parts]),
                       np.concatenate([pad(p.den, kp) for p in parts]), parts[0].ts_s)
        if order is not None:
            inv = np.empty_like(order)
            inv[order] = np.arange(order.size)
            out = out.take(inv)
        return out

    # ------------------------------------------------------------------ evaluation
    @property
    def nyquist_hz(self) -> float:
        return 0.5 / self.ts_s

    def _theta(self, f_hz) -> np.ndarray:
        th = TWO_PI * np.asarray(f_hz, dtype=float) * self.ts_s
        return th[None, :] if th.ndim == 1 else th

    def response(self, f_hz) -> np.ndarray:
        """Complex response at ``z = exp(j 2 pi f Ts)``, shape (corners, frequencies).

        ``f_hz`` is (nf,) shared by all corners or (corners, nf).
        """
        z = np.exp(1j * self._theta(f_hz))
        h = self.gain[:, None] * np.ones(z.shape, dtype=complex)
        for j in range(self.num.shape[1]):
            h = h * (self.num[:, j, 0, None] + self.num[:, j, 1, None] * z)
        for j in range(self.den.shape[1]):
            h = h / (self.den[:, j, 0, None] + self.den[:, j, 1, None] * z)
        return h

    def phase_deg(self, f_hz) -> np.ndarray:
        """Continuous phase in degrees (corners, frequencies): the sum of factor angles (module notes)."""
        th = self._theta(f_hz)
        ang = _factor_angles(self.num, th).sum(axis=1) - _factor_angles(self.den, th).sum(axis=1)
        return np.degrees(ang + np.where(self.gain < 0, -np.pi, 0.0)[:, None])

    def bode(self, f_hz) -> tuple[np.ndarray, np.ndarray]:
        """Magnitude in dB and continuous phase in degrees, each (corners, frequencies)."""
        return 20.0 * np.log10(np.abs(self.response(f_hz))), self.phase_deg(f_hz)

    def local(self, f_hz: np.ndarray, which: str) -> tuple[np.ndarray, np.ndarray]:
        """ln|H| (``"gain"``) or the continuous phase in rad (``"phase"``) at one frequency per corner,
        with its derivative with respect to ln f.

        Notes
        -----
        With ``z = exp(j theta)``, ``theta = 2 pi f Ts``: ``dz/d ln f = j theta z``, so
        ``d ln H / d ln f = sum_num a1 j theta z / (a0 + a1 z) - sum_den (same)``;
        its real part is the slope of ln|H|, its imaginary part the slope of the phase.
        """
        th = (TWO_PI * np.asarray(f_hz, float) * self.ts_s)[:, None]
        z = np.exp(1j * th)
        tn = self.num[:, :, 0] + self.num[:, :, 1] * z
        td = self.den[:, :, 0] + self.den[:, :, 1] * z
        dz = 1j * th * z
        slope = (self.num[:, :, 1] * dz / tn).sum(axis=1) - (self.den[:, :, 1] * dz / td).sum(axis=1)
        if which == "gain":
            value = np.log(np.abs(self.gain)) + np.log(np.abs(tn)).sum(axis=1) - np.log(np.abs(td)).sum(axis=1)
            return value, slope.real
        return np.radians(self.phase_deg(np.asarray(f_hz, float)[:, None])[:, 0]), slope.imag

    def dc_gain(self) -> np.ndarray:
        """H(z = 1) per corner (inf or 0 where there are roots at z = 1, signed like the gain)."""
        at_one = np.array([-1.0, 1.0])
        n1 = np.sum(np.all(self.num == at_one, axis=-1), axis=1)
        d1 = np.sum(np.all(self.den == at_one, axis=-1), axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            h = self.response(np.zeros(1))[:, 0].real
        return np.where(n1 > d1, 0.0, np.where(n1 < d1, np.inf * np.sign(self.gain), h))

    # ------------------------------------------------------------------ roots and polynomials
    @staticmethod
    def _roots(f: np.ndarray) -> np.ndarray:
        a0, a1 = f[..., 0], f[..., 1]
        pad = a1 == 0
        r = -a0 / np.where(pad, 1.0, a1)
        r[pad] = np.inf
        return r

    def zeros(self) -> np.ndarray:
        """Zeros in the z-plane, (corners, k) complex; ``inf`` = padding."""
        return self._roots(self.num)

    def poles(self) -> np.ndarray:
        """Poles in the z-plane, (corners, k) complex; ``inf`` = padding."""
        return self._roots(self.den)

    def polys(self) -> tuple[np.ndarray, np.ndarray]:
        """Ascending real coefficients in z of numerator and denominator."""
        return _poly_from_factors(self.gain, self.num), _poly_from_factors(np.ones(self.n_corners), self.den)

    def closed_loop_poles(self) -> np.ndarray:
        """Roots of ``1 + H(z) = 0`` per corner (z-plane), (corners, k) complex, ``inf`` where the order is short."""
        num, den = self.polys()
        m = max(num.shape[1], den.shape[1])
        char = np.zeros((self.n_corners, m))
        char[:, : num.shape[1]] += num
        char[:, : den.shape[1]] += den
        _, f = _polished_factors(char)
        return self._roots(f)

    def closed_loop_stable(self) -> np.ndarray:
        """True per corner where every root of ``1 + H(z)`` lies strictly inside the unit circle."""
        p = self.closed_loop_poles()
        return np.all(~np.isfinite(p) | (np.abs(p) < 1.0), axis=1)

    def difference_equation(self, corner: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """``(b, a)`` of corner ``corner`` in powers of ``z^-1`` with ``a[0] = 1`` (scipy ``lfilter``).

        Raises DesignError when the function is not causal (more zeros than poles).
        """
        num, den = self.take(corner).polys()
        num, den = np.trim_zeros(num[0], "b"), np.trim_zeros(den[0], "b")
        if num.size > den.size:
            raise DesignError("difference_equation", corner, "a causal filter (no more zeros than poles)")
        b = np.zeros(den.size)
        b[den.size - num.size:] = num[::-1]
        a = den[::-1]
        return b / a[0], a / a[0]

    def to_control(self, corner: int = 0):
        """python-control ``TransferFunction(num, den, dt=ts_s)`` of one corner."""
        import control  # lazy: importing control costs ~2 s

        num, den = self.take(corner).polys()
        num = np.trim_zeros(num[0], "b")[::-1]
        den = np.trim_zeros(den[0], "b")[::-1]
        return control.TransferFunction(num if num.size else [0.0], den, dt=self.ts_s)
