"""Digital controllers: discretised analog networks and direct digital forms, as :class:`Discrete`.

Discretised analog designs (for comparison with a direct digital design), both
mapping a :class:`Rational` (e.g. ``networks.<type>.transfer(parts, ctx)``)
factor by factor, vectorised over corners:

- :func:`tustin`: ``s = K (z - 1)/(z + 1)`` with ``K = 2/Ts``, or with
  prewarping at ``f1``, ``K = w1 / tan(w1 Ts/2)`` so that the discrete response
  equals the analog one at ``f1`` exactly.  A factor ``a0 + a1 s`` becomes
  ``((a0 - a1 K) + (a0 + a1 K) z) / (z + 1)``; the ``(z + 1)`` left over after
  numerator and denominator cancel are zeros at fs/2 (relative degree).
- :func:`matched`: every root ``s_i`` goes to ``z_i = exp(s_i Ts)``, each
  factor scaled so it is 1 at z = 1 (the DC gain is kept) and an origin root
  ``s`` becomes ``(z - 1)/Ts`` (the low-frequency asymptote is kept); the zeros
  at infinity go to z = -1 (or stay at infinity, python-control's rule).

Direct digital forms, parametrised by their z-plane roots: :func:`digital_pi`
``k (z - z1)/(z - 1)``, :func:`digital_pid` ``k (z - z1)(z - z2)/((z - 1)(z - p1))``
and :func:`digital_type3` ``k (z - z1)(z - z2)/((z - 1)(z - p1)(z - p2))`` (the
digital Type III: an integrator, two zeros, two poles).  Their difference
equations are :meth:`Discrete.difference_equation` (``b``, ``a``).

References: G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of
Dynamic Systems, 3rd ed., 1998, ch. 6 (Tustin with prewarping, matched
pole-zero; from memory); REFERENCES.md "Digital control".
"""

from __future__ import annotations

import numpy as np

from .discrete import Discrete, check_sample_time
from .errors import DesignError
from .rational import TWO_PI, Rational

__all__ = ["digital_pi", "digital_pid", "digital_type3", "matched", "tustin"]

_PAD = np.array([1.0 + 0j, 0.0 + 0j])


def _no_delay(net: Rational) -> None:
    if np.any(net.delay_s):
        raise DesignError("network", "a delay", "a rational network without a pure delay to discretise")


def _with_extra(f: np.ndarray, count: np.ndarray, factor) -> np.ndarray:
    """Append ``count`` (per corner, >= 0) copies of ``factor`` to factor array ``f`` (padding elsewhere)."""
    width = int(count.max()) if count.size else 0
    extra = np.broadcast_to(_PAD, (f.shape[0], width, 2)).copy()
    extra[np.arange(width)[None, :] < count[:, None]] = factor
    return np.concatenate([f, extra], axis=1)


def tustin(net: Rational, ts_s, prewarp_hz: float | None = None) -> Discrete:
    """Bilinear (Tustin) discretisation of ``net``, optionally prewarped at ``prewarp_hz``.

    Parameters
    ----------
    net : Rational
        Analog transfer function per corner (no pure delay).
    ts_s : float
        Sample period, s.
    prewarp_hz : float, optional
        Frequency where the discrete and analog responses agree exactly,
        0 < f < fs/2 (usually the crossover).

    Returns
    -------
    Discrete

    Notes
    -----
    s = K (z - 1)/(z + 1), K = 2/Ts, or K = w1/tan(w1 Ts/2) prewarped
    ([FPW] ch. 6, from memory; python-control ``sample_system(...,
    method='tustin', prewarp_frequency=w1)`` is the outside reference).
    """
    _no_delay(net)
    ts = check_sample_time(ts_s)
    if prewarp_hz is None:
        k = 2.0 / ts
    else:
        f1 = float(prewarp_hz)
        if not (np.isfinite(f1) and 0 < f1 < 0.5 / ts):
            raise DesignError("prewarp_hz", prewarp_hz, f"a frequency between 0 and fs/2 = {0.5 / ts:g} Hz")
        w1 = TWO_PI * f1
        k = w1 / np.tan(0.5 * w1 * ts)

    def mapped(f):
        a0, a1 = f[..., 0], f[..., 1]
        pad = (a1 == 0) & (a0 == 1)
        out = np.stack([a0 - a1 * k, a0 + a1 * k], axis=-1)
        return np.where(pad[..., None], _PAD, out), np.sum(~pad, axis=1)

    num, n_num = mapped(net.num)
    den, n_den = mapped(net.den)
    extra = n_den - n_num  # (z + 1) per factor, left over after cancelling
    num = _with_extra(num, np.maximum(extra, 0), (1.0, 1.0))
    den = _with_extra(den, np.maximum(-extra, 0), (1.0, 1.0))
    return Discrete.from_factors(net.gain, num, den, ts)


def matched(net: Rational, ts_s, zeros_at_infinity: str = "nyquist") -> Discrete:
    """Matched pole-zero discretisation of ``net``.

    Parameters
    ----------
    net : Rational
        Analog transfer function per corner (no pure delay).
    ts_s : float
        Sample period, s.
    zeros_at_infinity : {"nyquist", "keep"}
        ``"nyquist"`` maps the zeros at s = infinity to z = -1, each scaled to
        1 at z = 1 ([FPW] ch. 6, from memory); ``"keep"`` leaves them out
        (python-control's ``sample_system(method='matched')``).

    Returns
    -------
    Discrete
        Factor by factor: ``1 + a1 s`` (root r = -1/a1) becomes
        ``(z - e^{r Ts})/(1 - e^{r Ts})``, ``s`` becomes ``(z - 1)/Ts``; so the
        DC gain (or, with origin roots, the low-frequency asymptote) is kept.
    """
    _no_delay(net)
    ts = check_sample_time(ts_s)
    if zeros_at_infinity not in ("nyquist", "keep"):
        raise DesignError("zeros_at_infinity", zeros_at_infinity, "'nyquist' or 'keep'")

    def mapped(f):
        a0, a1 = f[..., 0], f[..., 1]
        pad = a1 == 0
        origin = a0 == 0
        r = -a0 / np.where(pad, 1.0, a1)
        zr = np.exp(r * ts)
        scale = np.where(origin, ts, 1.0 - np.where(origin, 0.0, zr))
        out = np.stack([-zr / scale, 1.0 / scale], axis=-1)
        return np.where(pad[..., None], f, out), np.sum(~pad, axis=1)

    num, n_num = mapped(net.num)
    den, n_den = mapped(net.den)
    if zeros_at_infinity == "nyquist":
        extra = n_den - n_num
        num = _with_extra(num, np.maximum(extra, 0), (0.5, 0.5))
        den = _with_extra(den, np.maximum(-extra, 0), (0.5, 0.5))
    return Discrete.from_factors(net.gain, num, den, ts)


def _roots(values, name: str, count: int) -> np.ndarray:
    r = np.asarray(values, dtype=complex)
    r = r.reshape(-1, 1) if count == 1 and r.ndim < 2 else np.atleast_2d(r)
    if r.shape[-1] != count or not np.all(np.isfinite(r)):
        raise DesignError(name, np.asarray(values).tolist(), f"{count} finite z-plane root(s) (per corner)")
    return r


def _gain(gain) -> np.ndarray:
    g = np.atleast_1d(np.asarray(gain, dtype=float))
    if not np.all(np.isfinite(g)):
        raise DesignError("gain", np.asarray(gain).tolist(), "a finite controller gain")
    return g


def digital_pi(gain, zero, ts_s) -> Discrete:
    """``gain (z - zero)/(z - 1)``: ``u[k] = u[k-1] + gain (e[k] - zero e[k-1])``."""
    z1 = _roots(zero, "zero", 1)
    return Discrete.from_roots(_gain(gain), z1, np.ones((z1.shape[0], 1)), ts_s)


def digital_pid(gain, zeros, pole, ts_s) -> Discrete:
    """``gain (z - z1)(z - z2)/((z - 1)(z - pole))``: PID with its derivative filter pole."""
    z = _roots(zeros, "zeros", 2)
    p = _roots(pole, "pole", 1)
    n = max(z.shape[0], p.shape[0])
    poles = np.concatenate([np.ones((n, 1)), np.broadcast_to(p, (n, 1))], axis=1)
    return Discrete.from_roots(_gain(gain), np.broadcast_to(z, (n, 2)), poles, ts_s)


def digital_type3(gain, zeros, poles, ts_s) -> Discrete:
    """``gain (z - z1)(z - z2)/((z - 1)(z - p1)(z - p2))``: the digital Type III."""
    z = _roots(zeros, "zeros", 2)
    p = _roots(poles, "poles", 2)
    n = max(z.shape[0], p.shape[0])
    all_p = np.concatenate([np.ones((n, 1)), np.broadcast_to(p, (n, 2))], axis=1)
    return Discrete.from_roots(_gain(gain), np.broadcast_to(z, (n, 2)), all_p, ts_s)
