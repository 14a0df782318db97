"""Factored rational transfer functions, vectorised over operating corners.

A :class:`Rational` holds, for every corner, a real gain and two lists of
first-order factors ``a0 + a1*s`` (numerator and denominator) plus an optional
pure delay::

    H(s) = gain * prod(a0_i + a1_i s) / prod(b0_j + b1_j s) * exp(-s * delay)

``s`` is the Laplace variable in rad/s; ``a1`` is therefore in seconds.  A zero
at the origin is the factor ``(0, 1)``; a missing factor (padding, so that
corners with fewer roots fit one array) is ``(1, 0)``.  Complex roots appear as
conjugate pairs of complex factors.  Every frequency exposed by this module is
in hertz.

Why factors and not polynomial coefficients: the response is exact at any
frequency, and the phase is the sum of the factors' angles, which is continuous
in frequency without unwrapping (each factor ``a0 + a1 j w`` moves along a
straight line that never circles the origin).  That makes phase margins with
right-half-plane zeros and integrators unambiguous.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["TWO_PI", "Rational", "poly_roots_inverse"]

TWO_PI = 2.0 * np.pi

_PAD = np.array([1.0 + 0j, 0.0 + 0j])

#: Roots spanning more decades than this (scaled) are split between two companion matrices.
_SPAN_SPLIT_DECADES = 6.0


#: Frequencies evaluated together by :meth:`Rational.response`.
_BLOCK = 128


def _active_factors(factors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(a0, j a1)`` of the factors that are not padding ``(1, 0)`` at every corner."""
    a0, a1 = factors[..., 0], factors[..., 1]
    keep = ~np.all((a1 == 0) & (a0 == 1), axis=0)
    return a0[:, keep], 1j * a1[:, keep]


def _as_factor_array(factors, n: int) -> np.ndarray:
    """Shape ``factors`` into a complex array (n, k, 2)."""
    arr = np.asarray(factors, dtype=complex)
    if arr.size == 0:
        return np.zeros((n, 0, 2), dtype=complex)
    if arr.ndim == 2:  # (k, 2): the same for every corner
        arr = np.broadcast_to(arr, (n,) + arr.shape)
    if arr.ndim != 3 or arr.shape[-1] != 2:
        raise ValueError(f"factor array must be (corners, k, 2), got shape {arr.shape}")
    return np.broadcast_to(arr, (n,) + arr.shape[1:])


def _normalise(gain: np.ndarray, factors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Scale factors to ``(1, a1/a0)`` or ``(0, 1)``; return the moved gain and factors."""
    a0 = factors[..., 0]
    a1 = factors[..., 1]
    origin = a0 == 0
    lead = np.where(origin, a1, a0)
    if np.any(lead == 0):
        raise ValueError("a factor 0 + 0 s is not allowed")
    out = np.empty_like(factors)
    out[..., 0] = np.where(origin, 0.0, 1.0)
    out[..., 1] = np.where(origin, 1.0, a1 / np.where(origin, 1.0, a0))
    return gain * np.prod(lead, axis=-1), out


def _companion_eigvals(desc: np.ndarray) -> np.ndarray:
    """Roots of ``desc_0 z^m + desc_1 z^(m-1) + ... + desc_m`` per row (desc_0 != 0)."""
    n, m1 = desc.shape
    m = m1 - 1
    companion = np.zeros((n, m, m))
    companion[:, 0, :] = -desc[:, 1:] / desc[:, :1]
    if m > 1:
        companion[:, np.arange(1, m), np.arange(m - 1)] = 1.0
    return np.linalg.eigvals(companion)


def poly_roots_inverse(coeffs: np.ndarray) -> np.ndarray:
    """Inverse roots of polynomials with a nonzero constant term, row by row.

    Parameters
    ----------
    coeffs : ndarray, shape (n, m + 1)
        Ascending coefficients ``c0 + c1 s + ... + cm s^m`` with ``c0 != 0``.
        Trailing (highest-order) zeros are allowed: they give inverse roots 0.

    Returns
    -------
    ndarray, shape (n, m), complex
        ``w`` such that ``p(s) = c0 * prod(1 - w_i s)``.

    Notes
    -----
    The ``w_i`` are the roots of the reversed polynomial
    ``c0 x^m + c1 x^(m-1) + ... + cm``, found as the eigenvalues of its
    companion matrix (one batched LAPACK call for all rows) after scaling ``s``
    by ``|c0/c_deg|^(1/deg)`` so the coefficients are balanced.  Eigenvalues are
    accurate to about eps times the matrix norm, so when the roots span many
    decades the small ``|w|`` (large ``|s|``) lose accuracy or come out as 0; for
    rows spanning more than ``_SPAN_SPLIT_DECADES`` the roots below the widest
    gap in magnitude are taken instead from the companion matrix of the
    polynomial itself (roots ``1/w``), where they are the large ones.  The
    split is never inside a cluster or a conjugate pair, whose members must
    come from one eigenvalue computation for their products to stay accurate.
    """
    c = np.asarray(coeffs, dtype=float)
    n, m1 = c.shape
    m = m1 - 1
    if m == 0:
        return np.zeros((n, 0), dtype=complex)
    if np.any(c[:, 0] == 0):
        raise ValueError("poly_roots_inverse needs a nonzero constant term")
    nonzero = c != 0
    deg = m - np.argmax(nonzero[:, ::-1], axis=1)
    top = c[np.arange(n), deg]
    with np.errstate(divide="ignore"):
        w_ref = np.where(deg > 0, np.abs(c[:, 0] / top) ** (1.0 / np.maximum(deg, 1)), 1.0)
    k = np.arange(m1)
    scaled = c * w_ref[:, None] ** k[None, :]
    rows = np.arange(n)
    # A: companion of r(x) = sum_k scaled_k x^(m-k), x = scaled inverse root:
    # accurate (relative to |x|) for |x| >= 1, the roots of small |s|
    xa = _companion_eigvals(scaled)
    # B: companion of q(y) = sum_{k <= deg} scaled_k y^k, y = 1/x, times y^(m - deg):
    # accurate for |y| >= 1, the roots of large |s| (which A can lose in eps * norm)
    idx = deg[:, None] - k[None, :]
    desc_b = np.where(idx >= 0, scaled[rows[:, None], np.maximum(idx, 0)], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        xb = 1.0 / _companion_eigvals(desc_b)
    xa = np.take_along_axis(xa, np.argsort(-np.abs(xa), axis=1), axis=1)  # largest |x| first
    xb = np.take_along_axis(xb, np.argsort(np.abs(xb), axis=1), axis=1)  # smallest |x| first
    # split where the sorted magnitudes have their widest gap (never inside a
    # cluster of near-multiple roots or a conjugate pair): above it from A,
    # below it from B; rows spanning less than _SPAN_SPLIT_DECADES use A alone
    mag = np.abs(xa)
    valid = k[None, :m] < deg[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        logm = np.where(valid, np.log10(np.maximum(mag, 1e-300)), np.nan)
        gaps = logm[:, :-1] - logm[:, 1:]  # >= 0, sorted descending
    gaps = np.where(valid[:, 1:], gaps, -np.inf) if m > 1 else np.zeros((n, 0))
    n_a = deg.copy()
    if m > 1:
        g_at = np.argmax(gaps, axis=1)
        g = gaps[rows, g_at]
        span = np.nan_to_num(logm[rows, 0] - logm[rows, np.maximum(deg - 1, 0)], nan=0.0)
        split = (g > 1.0) & (span > _SPAN_SPLIT_DECADES)
        n_a = np.where(split, g_at + 1, deg)
    pos = k[None, :m]
    from_b = np.take_along_axis(xb, np.clip(pos - n_a[:, None], 0, m - 1), axis=1)
    x = np.where(pos < n_a[:, None], xa, np.where(pos < deg[:, None], from_b, 0.0))
    with np.errstate(invalid="ignore"):
        paired = np.all(np.isclose(np.sort_complex(x), np.sort_complex(np.conj(x)), rtol=1e-9, atol=0), axis=1)
    x = np.where((paired & np.all(np.isfinite(x), axis=1))[:, None], x, np.where(pos < deg[:, None], xa, 0.0))
    w = x / w_ref[:, None]
    # exact zeros where the degree is short (eigvals of a zero block can be ~1e-300)
    order = np.argsort(-np.abs(w), axis=1)
    w = np.take_along_axis(w, order, axis=1)
    w[k[None, :m] >= deg[:, None]] = 0.0
    return w


def _roots_as_factors(coeffs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gain and normalised factors of polynomials (n, m+1), origin roots included."""
    c = np.asarray(coeffs, dtype=float)
    n, m1 = c.shape
    gain = np.empty(n)
    factors = np.empty((n, m1 - 1, 2), dtype=complex)
    zero_low = np.argmax(c != 0, axis=1)  # number of zero low-order coefficients
    if np.any(np.all(c == 0, axis=1)):
        raise ValueError("a polynomial is identically zero")
    # rows grouped by lowest and highest nonzero coefficient: trailing zeros left in a
    # companion matrix make a multiple eigenvalue at 0 that splits by eps^(1/multiplicity)
    # and can crowd out genuine small inverse roots
    top = m1 - 1 - np.argmax(c[:, ::-1] != 0, axis=1)
    for k, t in {(int(a), int(b)) for a, b in zip(zero_low, top)}:
        rows = np.nonzero((zero_low == k) & (top == t))[0]
        w = poly_roots_inverse(c[rows, k : t + 1])
        gain[rows] = c[rows, k]
        factors[np.ix_(rows, np.arange(k), [0])] = 0.0
        factors[np.ix_(rows, np.arange(k), [1])] = 1.0
        factors[rows, k:, 0] = 1.0
        factors[rows, k:, 1] = 0.0
        factors[rows, k:t, 1] = -w
    return gain, factors


def _polished_factors(coeffs: np.ndarray, iterations: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_roots_as_factors` followed by Newton steps on each root of the polynomial itself.

    The companion eigenvalues lose relative accuracy when a polynomial's roots
    spread over many decades (a sum of rational functions can have a numerator
    like that); a few Newton steps ``s -= p(s)/p'(s)`` on the original
    coefficients (Horner, complex) restore it.  A step is kept only where it
    lowers ``|p|`` and moves the root by less than 1e-4 of its size (a
    correction, not a jump to a neighbouring root), so a root that is already accurate, or one where ``p``
    overflows, stays as it was; conjugate roots stay conjugate because ``p`` is
    real.
    """
    gain, factors = _roots_as_factors(coeffs)
    c = np.asarray(coeffs, dtype=complex)
    m1 = c.shape[1]
    active = (factors[..., 0] == 1) & (factors[..., 1] != 0)
    w = -factors[..., 1]
    with np.errstate(all="ignore"):
        for _ in range(iterations):
            s = 1.0 / np.where(active, w, 1.0)
            p = np.zeros_like(s)
            dp = np.zeros_like(s)
            for k in range(m1 - 1, -1, -1):
                dp = dp * s + p
                p = p * s + c[:, k, None]
            s_new = s - p / np.where(dp == 0, 1.0, dp)
            p_new = np.zeros_like(s)
            for k in range(m1 - 1, -1, -1):
                p_new = p_new * s_new + c[:, k, None]
            near = np.abs(s_new - s) <= 1e-4 * np.abs(s)  # a correction, never a jump to another root
            better = active & np.isfinite(s_new) & near & (np.abs(p_new) < np.abs(p))
            w = np.where(better, 1.0 / np.where(better, s_new, 1.0), w)
    out = factors.copy()
    out[..., 1] = np.where(active, -w, factors[..., 1])
    return gain, out


def _poly_from_factors(gain: np.ndarray, factors: np.ndarray) -> np.ndarray:
    """Ascending real coefficients (n, k+1) of ``gain * prod(a0 + a1 s)``."""
    n, k, _ = factors.shape
    p = np.zeros((n, k + 1), dtype=complex)
    p[:, 0] = 1.0
    for i in range(k):
        a0 = factors[:, i, 0][:, None]
        a1 = factors[:, i, 1][:, None]
        shifted = np.zeros_like(p)
        shifted[:, 1:] = p[:, :-1]
        p = a0 * p + a1 * shifted
    return (gain[:, None] * p).real


def _unshared(fa: np.ndarray, fb: np.ndarray, rtol: float = 1e-12) -> tuple[np.ndarray, np.ndarray]:
    """Factors of ``fa`` not in ``fb`` and of ``fb`` not in ``fa`` (matched one to one), rest padding.

    Both are normalised factor arrays (n, k, 2); a factor matches when both
    coefficients agree to ``rtol``.  Vectorised over corners (a loop over the
    few factors of ``fb`` only).
    """
    n, ka = fa.shape[0], fa.shape[1]
    used = np.zeros((n, ka), bool)
    matched = np.zeros((n, fb.shape[1]), bool)
    rows = np.arange(n)
    for j in range(fb.shape[1]):
        f = fb[:, j : j + 1, :]
        close = np.all(np.abs(fa - f) <= rtol * np.maximum(np.abs(f), 1e-300), axis=-1) & ~used
        has = close.any(axis=1)
        first = np.argmax(close, axis=1)
        used[rows[has], first[has]] = True
        matched[has, j] = True
    return np.where(used[..., None], _PAD, fa), np.where(matched[..., None], _PAD, fb)


@dataclass(frozen=True, eq=False)
class Rational:
    """A transfer function per corner, in factored form (see the module notes).

    Attributes
    ----------
    gain : ndarray (n,)
        Real gain multiplying the normalised factors.
    num, den : ndarray (n, k, 2) complex
        Factors ``a0 + a1 s`` normalised to ``(1, a1)`` or ``(0, 1)``.
    delay_s : ndarray (n,)
        Pure delay in seconds.
    """

    gain: np.ndarray
    num: np.ndarray
    den: np.ndarray
    delay_s: np.ndarray

    # ------------------------------------------------------------------ constructors
    @classmethod
    def from_factors(cls, gain, num=(), den=(), delay_s=0.0) -> Rational:
        """Build from a gain and factor lists ``[(a0, a1), ...]`` (any scaling).

        ``gain`` may be a scalar or an array over corners; factor arrays may be
        (k, 2) for all corners or (n, k, 2).
        """
        g = np.atleast_1d(np.asarray(gain, dtype=float))
        shapes = [g.shape[0]]
        for f in (num, den):
            a = np.asarray(f, dtype=complex)
            if a.ndim == 3:
                shapes.append(a.shape[0])
        d = np.atleast_1d(np.asarray(delay_s, dtype=float))
        shapes.append(d.shape[0])
        n = max(shapes)
        g = np.broadcast_to(g, (n,)).astype(float)
        nf = _as_factor_array(num, n)
        df = _as_factor_array(den, n)
        gn, nf = _normalise(np.ones(n, dtype=complex), nf)
        gd, df = _normalise(np.ones(n, dtype=complex), df)
        ratio = gn / gd
        if np.any(np.abs(ratio.imag) > 1e-9 * np.abs(ratio)):
            raise ValueError("complex factors must come in conjugate pairs")
        return cls(g * ratio.real, nf, df, np.broadcast_to(d, (n,)).astype(float))

    @classmethod
    def from_roots_hz(cls, gain, zeros_hz=(), poles_hz=()) -> Rational:
        """Gain times ``prod(1 - s/z) / prod(1 - s/p)`` with roots given in Hz (s/2 pi).

        A root at 0 becomes ``s/(2 pi)``-free factor ``s``; the gain is then the
        coefficient of that power of s.  ``inf`` entries are padding.
        """

        def fac(r):
            r = np.asarray(r, dtype=complex)
            if r.size == 0:
                return np.zeros(r.shape + (2,), dtype=complex)[..., :0, :] if r.ndim else ()
            out = np.empty(r.shape + (2,), dtype=complex)
            at_zero = r == 0
            finite = np.isfinite(r)
            safe = np.where(at_zero | ~finite, 1.0, r)
            out[..., 0] = np.where(at_zero, 0.0, 1.0)
            out[..., 1] = np.where(at_zero, 1.0, np.where(finite, -1.0 / (TWO_PI * safe), 0.0))
            return out

        return cls.from_factors(gain, fac(zeros_hz), fac(poles_hz))

    @classmethod
    def from_polys(cls, num, den, delay_s=0.0) -> Rational:
        """Build from ascending polynomial coefficients in s (rad/s), shape (n, k)."""
        num = np.atleast_2d(np.asarray(num, dtype=float))
        den = np.atleast_2d(np.asarray(den, dtype=float))
        n = max(num.shape[0], den.shape[0])
        num = np.broadcast_to(num, (n, num.shape[1]))
        den = np.broadcast_to(den, (n, den.shape[1]))
        gn, fn = _roots_as_factors(num)
        gd, fd = _roots_as_factors(den)
        return cls(gn / gd, fn, fd, np.broadcast_to(np.asarray(delay_s, float), (n,)).copy())

    @classmethod
    def constant(cls, value, n: int | None = None) -> Rational:
        v = np.atleast_1d(np.asarray(value, dtype=float))
        if n is not None:
            v = np.broadcast_to(v, (n,))
        n = v.shape[0]
        empty = np.zeros((n, 0, 2), dtype=complex)
        return cls(v.astype(float), empty, empty.copy(), np.zeros(n))

    # ------------------------------------------------------------------ algebra
    @property
    def n_corners(self) -> int:
        return self.gain.shape[0]

    def broadcast(self, n: int) -> Rational:
        if self.n_corners == n:
            return self
        if self.n_corners != 1:
            raise ValueError(f"cannot broadcast {self.n_corners} corners to {n}")
        return Rational(
            np.broadcast_to(self.gain, (n,)).copy(),
            np.broadcast_to(self.num, (n,) + self.num.shape[1:]).copy(),
            np.broadcast_to(self.den, (n,) + self.den.shape[1:]).copy(),
            np.broadcast_to(self.delay_s, (n,)).copy(),
        )

    def __mul__(self, other) -> Rational:
        if not isinstance(other, Rational):
            return Rational(self.gain * np.asarray(other, dtype=float), self.num, self.den, self.delay_s)
        n = max(self.n_corners, other.n_corners)
        a, b = self.broadcast(n), other.broadcast(n)
        return Rational(
            a.gain * b.gain,
            np.concatenate([a.num, b.num], axis=1),
            np.concatenate([a.den, b.den], axis=1),
            a.delay_s + b.delay_s,
        )

    __rmul__ = __mul__

    def inverse(self) -> Rational:
        return Rational(1.0 / self.gain, self.den, self.num, -self.delay_s)

    def __truediv__(self, other) -> Rational:
        if not isinstance(other, Rational):
            return self * (1.0 / np.asarray(other, dtype=float))
        return self * other.inverse()

    def __neg__(self) -> Rational:
        return Rational(-self.gain, self.num, self.den, self.delay_s)

    def _as_rational(self, other) -> Rational:
        if isinstance(other, Rational):
            return other
        v = np.atleast_1d(np.asarray(other, dtype=float))
        return Rational.constant(np.broadcast_to(v, (max(v.shape[0], self.n_corners),)))

    def __add__(self, other) -> Rational:
        """Sum per corner (python-control's ``parallel``), denominators shared where identical.

        Denominator factors present in both terms (the same plant poles, e.g. Gid
        and Gvd over one characteristic polynomial) are kept once, so the sum is
        not padded with cancelling pole-zero pairs; numerator factors common to
        both terms stay as they are, and only the rest of the numerator is
        rooted afresh (multiple roots would lose accuracy there).  Terms with different delays cannot be summed in factored
        form (ValueError).
        """
        if not isinstance(other, Rational) and np.all(np.asarray(other) == 0):
            return self  # sum() starts from 0: nothing to add, nothing to re-root
        other = self._as_rational(other)
        n = max(self.n_corners, other.n_corners)
        a, b = self.broadcast(n), other.broadcast(n)
        if np.any(a.delay_s != b.delay_s):
            raise ValueError("Rational sum: the terms have different delays")
        a_only, b_only = _unshared(a.den, b.den)
        # a + b = (Na Eb + Nb Ea) / (Da Eb): factors common to both products stay factored
        na, nb = np.concatenate([a.num, b_only], axis=1), np.concatenate([b.num, a_only], axis=1)
        na_rest, nb_rest = _unshared(na, nb)
        common = np.where(np.all(na_rest == _PAD, axis=-1)[..., None], na, _PAD)
        pa = _poly_from_factors(a.gain, na_rest)
        pb = _poly_from_factors(b.gain, nb_rest)
        m = max(pa.shape[1], pb.shape[1])
        total = np.zeros((n, m))
        total[:, : pa.shape[1]] += pa
        total[:, : pb.shape[1]] += pb
        zero = np.all(total == 0, axis=1)
        total[zero, 0] = 1.0  # an identically zero row: gain 0 below, factors irrelevant
        gain, num = _polished_factors(total)
        gain[zero] = 0.0
        num = np.concatenate([common, num], axis=1)
        return Rational(gain, num, np.concatenate([a.den, b_only], axis=1), a.delay_s.copy())

    __radd__ = __add__

    def __sub__(self, other) -> Rational:
        return self + (-self._as_rational(other))

    def __rsub__(self, other) -> Rational:
        return (-self) + other

    @staticmethod
    def sum(parts) -> Rational:
        """Sum of an iterable of Rationals (see :meth:`__add__`)."""
        parts = list(parts)
        if not parts:
            raise ValueError("Rational.sum of nothing")
        total = parts[0]
        for p in parts[1:]:
            total = total + p
        return total

    def cancel(self, rtol: float = 1e-12) -> Rational:
        """The same function with numerator and denominator factors that agree to ``rtol`` removed.

        Meant for factors that are the same by construction (the plant's poles
        coming back as zeros of a closed loop built from it), not for
        approximate cancellation: the default tolerance only matches factors
        equal to rounding.
        """
        num, den = _unshared(self.num, self.den, rtol)

        def compact(f):  # drop the factor columns that are padding at every corner
            keep = ~np.all(np.all(f == _PAD, axis=-1), axis=0)
            return f[:, keep]

        return Rational(self.gain.copy(), compact(num), compact(den), self.delay_s.copy())

    def feedback(self, other=1.0, sign: int = -1) -> Rational:
        """Closed loop ``self / (1 - sign * self * other)`` per corner (python-control's ``feedback``).

        Parameters
        ----------
        other : Rational or float
            Transfer function in the feedback path.
        sign : {-1, 1}
            -1 (the default) for negative feedback, +1 for positive.

        Notes
        -----
        With ``self = gs Ns/Ds`` and ``other = go No/Do`` the closed loop is
        ``gs Ns Do / (Ds Do - sign gs go Ns No)``: the numerator keeps its
        factors, the characteristic polynomial is rooted once per corner.  A
        delay has no rational closed loop (ValueError).
        """
        if sign not in (-1, 1):
            raise ValueError(f"feedback sign must be -1 or +1, got {sign!r}")
        other = self._as_rational(other)
        n = max(self.n_corners, other.n_corners)
        g, h = self.broadcast(n), other.broadcast(n)
        if np.any(g.delay_s) or np.any(h.delay_s):
            raise ValueError("Rational.feedback: a loop with a delay has no rational closed loop")
        num_l, den_l = (g * h).polys()
        m = max(num_l.shape[1], den_l.shape[1])
        char = np.zeros((n, m))
        char[:, : den_l.shape[1]] += den_l
        char[:, : num_l.shape[1]] -= sign * num_l
        gc, fc = _polished_factors(char)
        return Rational(g.gain / gc, np.concatenate([g.num, h.den], axis=1), fc, np.zeros(n))

    def take(self, index) -> Rational:
        """The corners selected by ``index`` (int, slice, mask or index array)."""
        idx = np.atleast_1d(np.arange(self.n_corners)[index])
        return Rational(self.gain[idx], self.num[idx], self.den[idx], self.delay_s[idx])

    @staticmethod
    def stack(parts: list[Rational], order: np.ndarray | None = None) -> Rational:
        """Concatenate corners of several Rationals (padding factor lists)."""
        kz = max(p.num.shape[1] for p in parts)
        kp = max(p.den.shape[1] for p in parts)

        def pad(f, k):
            extra = k - f.shape[1]
            if extra == 0:
                return f
            return np.concatenate([f, np.broadcast_to(_PAD, (f.shape[0], extra, 2))], axis=1)

        out = Rational(
            np.concatenate([p.gain for p in parts]),
            np.concatenate([pad(p.num, kz) for p in parts]),
            np.concatenate([pad(p.den, kp) for p in parts]),
            np.concatenate([p.delay_s for p in parts]),
        )
        if order is not None:
            inv = np.empty_like(order)
            inv[order] = np.arange(order.size)
            out = out.take(inv)
        return out

    # ------------------------------------------------------------------ evaluation
    @staticmethod
    def _s(f_hz) -> np.ndarray:
        return 1j * TWO_PI * np.asarray(f_hz, dtype=float)

    def _per_corner(self, f_hz) -> np.ndarray:
        """Laplace variable shaped (n or 1, nf)."""
        s = self._s(f_hz)
        return s[None, :] if s.ndim == 1 else s

    def response(self, f_hz) -> np.ndarray:
        """Complex response, shape (corners, frequencies).

        ``f_hz`` is (nf,) shared by all corners or (corners, nf).

        Notes
        -----
        Evaluated factor by factor in blocks of :data:`_BLOCK` frequencies (the
        temporaries stay in cache), skipping factors that are padding at every
        corner.
        """
        w = TWO_PI * np.asarray(f_hz, dtype=float)
        w = w[None, :] if w.ndim == 1 else w
        n, nf = self.n_corners, w.shape[-1]
        n0, n1 = _active_factors(self.num)
        d0, d1 = _active_factors(self.den)
        gain = self.gain[:, None].astype(complex)
        delay = self.delay_s[:, None] if np.any(self.delay_s) else None
        out = np.empty((n, nf), dtype=complex)
        for lo in range(0, nf, _BLOCK):
            ww = w[:, lo : lo + _BLOCK]
            h = gain * np.ones(ww.shape)
            for j in range(n0.shape[1]):
                h *= n0[:, j, None] + n1[:, j, None] * ww
            if d0.shape[1]:
                den = d0[:, 0, None] + d1[:, 0, None] * ww
                for j in range(1, d0.shape[1]):
                    den *= d0[:, j, None] + d1[:, j, None] * ww
                h /= den
            if delay is not None:
                h *= np.exp(-1j * ww * delay)
            out[:, lo : lo + _BLOCK] = h
        return out

    def phase_deg(self, f_hz) -> np.ndarray:
        """Continuous phase in degrees, (corners, frequencies): the sum of factor angles.

        At low frequency a positive gain reads 0 deg and a negative gain -180 deg
        (so an inverting stage reads -180 deg, never +180 deg), each origin zero
        adds +90 deg and each origin pole -90 deg.
        """
        s = self._per_corner(f_hz)[:, None, :]
        ang = np.sum(np.angle(self.num[:, :, 0, None] + self.num[:, :, 1, None] * s), axis=1)
        ang = ang - np.sum(np.angle(self.den[:, :, 0, None] + self.den[:, :, 1, None] * s), axis=1)
        ang = ang + np.where(self.gain < 0, -np.pi, 0.0)[:, None]
        ang = ang - s[:, 0, :].imag * self.delay_s[:, None]
        return np.degrees(ang)

    def bode(self, f_hz) -> tuple[np.ndarray, np.ndarray]:
        """Magnitude in dB and continuous phase in degrees, each (corners, frequencies)."""
        return 20.0 * np.log10(np.abs(self.response(f_hz))), self.phase_deg(f_hz)

    def dc_gain(self) -> np.ndarray:
        """H(0) per corner (inf or 0 where there are origin poles or zeros)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            nz = np.sum(self.num[:, :, 0] == 0, axis=1) - np.sum(self.den[:, :, 0] == 0, axis=1)
        return np.where(nz == 0, self.gain, np.where(nz < 0, np.inf * np.sign(self.gain), 0.0))

    # ------------------------------------------------------------------ roots
    @staticmethod
    def _roots(f: np.ndarray) -> np.ndarray:
        a0, a1 = f[..., 0], f[..., 1]
        pad = a1 == 0
        r = -a0 / np.where(pad, 1.0, a1) / TWO_PI
        r[pad] = np.inf
        return r

    def zeros_hz(self) -> np.ndarray:
        """Zeros as s-plane roots divided by 2 pi (Hz), (corners, k); inf = padding."""
        return self._roots(self.num)

    def poles_hz(self) -> np.ndarray:
        """Poles as s-plane roots divided by 2 pi (Hz), (corners, k); inf = padding."""
        return self._roots(self.den)

    # ------------------------------------------------------------------ polynomials
    def polys(self) -> tuple[np.ndarray, np.ndarray]:
        """Ascending real coefficients in s (rad/s) of numerator and denominator."""
        n = self.n_corners
        return _poly_from_factors(self.gain, self.num), _poly_from_factors(np.ones(n), self.den)

    def closed_loop_poles_hz(self) -> np.ndarray:
        """Roots of ``1 + H(s) = 0`` per corner in Hz (s/2 pi); the delay is ignored.

        Returns (corners, k) complex with ``inf`` where the order is short.
        """
        num, den = self.polys()
        k = max(num.shape[1], den.shape[1])
        char = np.zeros((self.n_corners, k))
        char[:, : num.shape[1]] += num
        char[:, : den.shape[1]] += den
        _, factors = _roots_as_factors(char)
        return self._roots(factors)

    def to_control(self, corner: int = 0):
        """python-control TransferFunction of one corner (s in rad/s)."""
        import control  # lazy: importing control costs ~2 s

        num, den = self.take(corner).polys()
        num = np.trim_zeros(num[0], "b")[::-1]
        den = np.trim_zeros(den[0], "b")[::-1]
        if self.delay_s[corner]:
            raise ValueError("python-control has no exact delay: this corner has one")
        return control.TransferFunction(num, den)
