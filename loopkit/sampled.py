"""The averaged plant seen by a sampled controller, behind a hold or a modulated edge and a fractional delay, exactly.

A digital controller updates its output u_k once per sample period Ts; the
modulator holds it (zero-order hold) and applies it after the total loop delay
``tau`` (computation plus the modulator's own delay, :func:`modulator_delay_s`),
so the averaged plant x' = A x + B v, y = C x + D v sees

    v(t) = u_k   for   k Ts + tau <= t < (k + 1) Ts + tau,

and the converter samples y at t = k Ts.  With ``tau = N Ts + rho``,
``0 <= rho < Ts``, integrating over one period gives exactly ([FPW] ch. 4.3,
discretisation with a fractional input delay; from memory)::

    x_{k+1} = Phi x_k + Gamma_a u_{k-N-1} + Gamma_b u_{k-N}
    Phi = e^{A Ts},  Gamma_b = Gamma(Ts - rho),  Gamma_a = e^{A (Ts - rho)} Gamma(rho),
    Gamma(h) = int_0^h e^{A s} ds B,

each exponential taken from one augmented matrix, ``expm([[A, B], [0, 0]] h) =
[[e^{A h}, Gamma(h)], [0, 1]]`` (C. Van Loan, "Computing integrals involving the
matrix exponential", IEEE Trans. Automatic Control 23(3), 1978; from memory).
So

    T(z) = z^-(N+1) [C (zI - Phi)^-1 (Gamma_a + z Gamma_b) + D]          (rho > 0)
    T(z) = z^-N     [C (zI - Phi)^-1 Gamma(Ts) + D]                      (rho = 0),

the modified z-transform of the hold-equivalent plant; with rho = 0 it is
python-control's ``sample_system(method='zoh')`` times ``z^-N``.  The sample at
``k Ts`` takes the held input in force just before (right-continuous), so D
multiplies ``u_{k-N-1}`` when rho > 0.  The poles are exactly ``exp(p Ts)``
for the plant's poles ``p`` (from its factors, not from Phi) plus N or N + 1
at the origin; the numerator is ``C adj(zI - Phi) Gamma`` from the
Faddeev-LeVerrier recursion on that characteristic polynomial.  Time is scaled
by Ts inside (A Ts), which balances the state matrices.

The modulated edge (``hold="edge"``, what a digital PWM loop is)
----------------------------------------------------------------
A counter PWM does not hold a duty: it moves a switch edge.  A change ``u_k`` of
the duty written for one period widens that period's pulse by ``u_k Ts`` at the
modulated edge, ``tau`` after the sample; in the small-signal limit that is an
impulse of area ``Ts u_k`` at ``k Ts + tau``, not a step held for a period.  The
sample at ``n Ts`` sees every impulse before it, so with ``n0 = floor(tau/Ts) + 1``
and ``delta = n0 Ts - tau`` (in ``(0, Ts]``)::

    T(z) = z^-(n0 - 1) Ts C (zI - Phi)^-1 e^{A delta} B

(the modified z-transform of the impulse response, ``Ts sum h(n Ts - tau) z^-n``;
the plant's high-frequency constant D carries an impulse no sample sees).  This is
the discrete-time small-signal model of D. Maksimovic, R. Zane, "Small-signal
discrete-time modeling of digitally controlled PWM converters", IEEE Trans. Power
Electronics 22(6), 2007 (from memory).  Holding the duty for a period from the
edge instead (``"zoh"``) adds half a sample period of delay: 9 deg at fs/20.  The
switching simulation of the digital loop (:mod:`loopkit.switching.digital`,
tests/test_switching_digital.py) measures the edge model's loop gain to within
0.1 dB / 0.3 deg up to fsw/3 on a buck, and the hold model's to 1 deg at fs/200
and 18 deg at fs/10: the converter follows the edge.

Cost: per group of corners with the same order, two stacked ``scipy.linalg.expm``
calls on (order + 1)-square matrices, then one batched root finding of the
numerators.  scipy's expm works matrix by matrix, so this is about 1-2 ms per
corner on the shared 2-core machine (12 corners of a third-order plant: 25-100 ms
depending on load); everything else is vectorised.  The plant's discretisation
depends on the stage and the delays only, not on the controller.

References: [FPW] G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control
of Dynamic Systems, 3rd ed., 1998, ch. 4; [CMMZ] L. Corradini, D. Maksimovic,
P. Mattavelli, R. Zane, Digital Control of High-Frequency Switched-Mode Power
Converters, Wiley-IEEE 2015 (modulator delays).
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm

from .discrete import Discrete, check_sample_time
from .errors import DesignError
from .rational import Rational, _poly_from_factors

__all__ = ["MODULATORS", "modulator_delay_s", "sampled_plant"]

#: Uniformly sampled PWM modulators and their small-signal delay as a fraction of Ts ([CMMZ], from memory).
MODULATORS = ("trailing-edge", "leading-edge", "symmetric")


def modulator_delay_s(modulator: str, duty, ts_s) -> np.ndarray:
    """Small-signal delay of a uniformly sampled PWM modulator, s, per corner.

    Parameters
    ----------
    modulator : {"trailing-edge", "leading-edge", "symmetric"}
        Carrier: trailing-edge (rising ramp, the duty sets the falling edge),
        leading-edge (the duty sets the rising edge), symmetric triangle.
    duty : float or ndarray (corners,)
        Duty cycle D at each corner, 0..1.
    ts_s : float
        Sample (switching) period, s; the duty is updated at the start of it.

    Returns
    -------
    ndarray (corners,)
        ``D Ts`` (trailing edge), ``(1 - D) Ts`` (leading edge) or ``Ts / 2`` (symmetric).

    Notes
    -----
    [CMMZ] ch. 3 (from memory), as summarised in REFERENCES.md "Digital control".
    """
    ts = check_sample_time(ts_s)
    d = np.atleast_1d(np.asarray(duty, dtype=float))
    if not np.all(np.isfinite(d)) or np.any((d < 0) | (d > 1)):
        raise DesignError("duty", np.asarray(duty).tolist(), "duty cycles between 0 and 1")
    if modulator == "trailing-edge":
        return d * ts
    if modulator == "leading-edge":
        return (1.0 - d) * ts
    if modulator == "symmetric":
        return np.full(d.shape, 0.5 * ts)
    raise DesignError("modulator", modulator, f"one of {', '.join(MODULATORS)}")


def _state_space(num: np.ndarray, den: np.ndarray, ts: float):
    """Controllable canonical form in scaled time t/Ts of rows with one degree: (A, B, C, D) stacked."""
    m, k = num.shape[0], den.shape[1] - 1
    scale = ts ** np.arange(den.shape[1])  # s = s' / Ts: coefficient of s'^i is c_i / Ts^i
    d = den / scale
    nn = np.zeros_like(d)
    nn[:, : num.shape[1]] = num[:, : den.shape[1]] / scale[: num.shape[1]]
    lead = d[:, k:k + 1]
    d, nn = d / lead, nn / lead
    dd = nn[:, k].copy()
    rest = nn[:, :k] - dd[:, None] * d[:, :k]
    a = np.zeros((m, k, k))
    if k > 1:
        a[:, np.arange(k - 1), np.arange(1, k)] = 1.0
    a[:, k - 1, :] = -d[:, :k]
    b = np.zeros((m, k))
    b[:, k - 1] = 1.0
    return a, b, rest, dd


def _hold_integrals(a: np.ndarray, b: np.ndarray, h: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``e^{A h}`` and ``Gamma(h)`` per row from one stacked expm of the augmented matrices."""
    m, k = b.shape
    aug = np.zeros((m, k + 1, k + 1))
    aug[:, :k, :k] = a
    aug[:, :k, k] = b
    e = expm(aug * h[:, None, None])
    return e[:, :k, :k], e[:, :k, k]


def _adjugate_numerator(phi, gam, char) -> np.ndarray:
    """The vectors multiplying each power of z in ``adj(zI - Phi) gam``, per row.

    Faddeev-LeVerrier: ``adj(zI - Phi) = sum_{i=0}^{k-1} z^{k-1-i} M_i``, ``M_0 = I``,
    ``M_i = Phi M_{i-1} + c_i I`` with ``det(zI - Phi) = z^k + c_1 z^{k-1} + ... + c_k``.
    Returns (m, k, k): ``out[:, p, :]`` is the vector multiplying ``z^p``.
    """
    m, k = gam.shape
    out = np.zeros((m, k, k))
    v = gam.copy()  # M_0 gam
    out[:, k - 1, :] = v
    for i in range(1, k):
        v = np.einsum("mij,mj->mi", phi, v) + char[:, i, None] * gam
        out[:, k - 1 - i, :] = v
    return out


def _group(plant: Rational, idx: np.ndarray, ts: float, tau: np.ndarray, hold: str = "zoh") -> Discrete:
    """Rows ``idx`` of ``plant``, which share one denominator degree (the state dimension)."""
    sub = plant.take(idx)
    num, den = sub.polys()
    k = int(np.max(np.nonzero(np.any(den != 0, axis=0))[0]))
    m = idx.size
    n_whole = np.floor(tau / ts + 1e-12).astype(int)
    rho = np.clip(tau / ts - n_whole, 0.0, None)
    rho[rho < 1e-12] = 0.0
    frac = rho > 0
    # discrete poles exp(p Ts) from the plant's own factors: z - exp(-Ts a0/a1) per active factor
    f = sub.den
    active = f[..., 1] != 0
    p = np.where(active, -f[..., 0] / np.where(active, f[..., 1], 1.0), 0.0)
    zp = np.exp(p * ts)
    fac_den = np.where(active[..., None], np.stack([-zp, np.ones_like(zp)], axis=-1), np.array([1.0, 0.0]))
    if k == 0:  # a constant: only the delay
        gain = (num[:, 0] / den[:, 0]).real
        out = Discrete(gain, np.zeros((m, 0, 2), complex), np.zeros((m, 0, 2), complex), ts)
        return out * Discrete.delay(n_whole + frac, ts)
    a, b, c, d = _state_space(num[:, : k + 1], den[:, : k + 1], ts)
    char_asc = _poly_from_factors(np.ones(m), fac_den.astype(complex))[:, : k + 1]
    if hold == "edge":  # T(z) = z^-(n0 - 1) C (zI - Phi)^-1 e^{A delta} B Ts (module notes); time scaled by Ts
        n0 = np.floor(tau / ts + 1e-12).astype(int) + 1
        delta = n0 - tau / ts
        e_delta, _ = _hold_integrals(a, b, delta)
        phi, _ = _hold_integrals(a, b, np.ones(m))
        gam = np.einsum("mij,mj->mi", e_delta, b)
        numer = np.einsum("mpk,mk->mp", _adjugate_numerator(phi, gam, char_asc[:, ::-1]), c)
        zeros = Discrete.from_polys(numer, np.ones((m, 1)), ts)
        poles = Discrete(np.ones(m), np.zeros((m, 0, 2), complex), fac_den.astype(complex), ts)
        return zeros * poles * Discrete.delay(n0 - 1, ts)
    e_rest, g_rest = _hold_integrals(a, b, 1.0 - rho)  # e^{A (Ts - rho)}, Gamma(Ts - rho)
    e_rho, g_rho = _hold_integrals(a, b, rho)
    phi = np.einsum("mij,mjk->mik", e_rest, e_rho)
    gam_a = np.einsum("mij,mj->mi", e_rest, g_rho)
    gam_b = g_rest
    # characteristic polynomial prod(z - exp(p Ts)): ascending, then descending c_0 = 1 ... c_k
    char_desc = char_asc[:, ::-1]
    c_a = np.einsum("mpk,mk->mp", _adjugate_numerator(phi, gam_a, char_desc), c)  # powers 0 .. k-1
    c_b = np.einsum("mpk,mk->mp", _adjugate_numerator(phi, gam_b, char_desc), c)
    numer = d[:, None] * char_asc  # D det(zI - Phi)
    numer[:, :k] += c_a + np.where(frac[:, None], 0.0, c_b)
    numer[:, 1:] += np.where(frac[:, None], c_b, 0.0)  # z Gamma_b when rho > 0
    # rho = 0: T = z^-N [C (zI - Phi)^-1 Gamma(Ts) + D]; rho > 0: z^-(N+1) [C (zI - Phi)^-1 (Gamma_a + z Gamma_b) + D]
    zeros = Discrete.from_polys(numer, np.ones((m, 1)), ts)
    poles = Discrete(np.ones(m), np.zeros((m, 0, 2), complex), fac_den.astype(complex), ts)
    return zeros * poles * Discrete.delay(n_whole + frac, ts)


def sampled_plant(plant: Rational, ts_s, delay_s=0.0, hold: str = "zoh") -> Discrete:
    """The averaged plant behind a zero-order hold and a total loop delay, exactly in z.

    Parameters
    ----------
    plant : Rational
        The averaged plant per corner (e.g. ``analyse_stage(design).gvd`` times
        the modulator and sensing gains); its own delay, if any, adds to ``delay_s``.
    ts_s : float
        Sample period, s.
    delay_s : float or ndarray (corners,)
        Total loop delay (computation plus the modulator's, :func:`modulator_delay_s`), s, >= 0;
        any multiple or fraction of Ts.
    hold : {"zoh", "edge"}
        ``"zoh"``: the input held from ``k Ts + tau`` for one period (the hold-equivalent plant);
        ``"edge"``: each sample's change acts as an impulse of area ``Ts u_k`` at ``k Ts + tau``, as a
        modulated PWM edge does (module notes: what a digital PWM loop is).

    Returns
    -------
    Discrete
        ``T(z)`` per corner from the controller's output sample ``u_k`` to the
        output sample ``y_k`` (module notes).

    Notes
    -----
    Exact for the linear averaged model (no Pade approximation): the modified
    z-transform with a zero-order hold of [FPW] ch. 4 (from memory), from
    matrix exponentials.  A corner's DC gain is the plant's.
    """
    ts = check_sample_time(ts_s)
    n = plant.n_corners
    tau = np.broadcast_to(np.atleast_1d(np.asarray(delay_s, dtype=float)), (n,)).astype(float)
    if not np.all(np.isfinite(tau)) or np.any(tau < 0):
        raise DesignError("delay_s", np.asarray(delay_s).tolist(), "a loop delay in seconds >= 0")
    tau = tau + plant.delay_s
    plant = Rational(plant.gain, plant.num, plant.den, np.zeros(n))
    num, den = plant.polys()
    if np.any(np.all(num == 0, axis=1)):
        bad = int(np.nonzero(np.all(num == 0, axis=1))[0][0])
        raise DesignError("plant", f"corner {bad}", "a plant that is not identically zero")
    deg_n = num.shape[1] - 1 - np.argmax(num[:, ::-1] != 0, axis=1)
    deg_d = den.shape[1] - 1 - np.argmax(den[:, ::-1] != 0, axis=1)
    if hold not in ("zoh", "edge"):
        raise DesignError("hold", hold, "zoh or edge")
    if np.any(deg_n > deg_d):
        bad = int(np.nonzero(deg_n > deg_d)[0][0])
        raise DesignError("plant", f"corner {bad}", "a proper plant (no more zeros than poles) to sample")
    parts, order = [], []
    for dd in np.unique(deg_d):
        idx = np.nonzero(deg_d == dd)[0]
        parts.append(_group(plant, idx, ts, tau[idx], hold))
        order.append(idx)
    return Discrete.stack(parts, np.concatenate(order))

