"""Loop margins at every corner, refined on the exact transfer function.

The frequency grid only brackets the crossings: every gain crossover
(|T| = 1) and phase crossover (phase = -180 deg + k 360 deg) found between two
grid points is then solved on the exact factored T(s) by a vectorised
Illinois (modified regula falsi) iteration in log frequency, so the margins do
not depend on the grid density.  Closed-loop stability is decided from the
roots of 1 + T(s) = 0, never from the margins alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .rational import Rational

__all__ = ["Margins", "loop_margins"]


@dataclass(frozen=True, eq=False)
class Margins:
    """Stability margins per corner; arrays shaped (corners,).

    Attributes
    ----------
    fc_hz : ndarray
        Gain crossover (the lowest, if there are several); NaN if none.
    pm_deg : ndarray
        Phase margin, the smallest over all gain crossovers, wrapped to
        (-180, 180]; NaN if there is no crossover.
    gm_db : ndarray
        Gain margin in dB: how much the gain may rise before |T| = 1 at a phase
        crossover above which |T| < 1; the smallest such; inf if none.
    f180_hz : ndarray
        Phase crossover used for ``gm_db``; NaN if none.
    gm_low_db : ndarray
        Conditional stability: how much the gain may fall before a phase
        crossover where |T| > 1 reaches 0 dB (positive dB); inf if none.
    delay_margin_s : ndarray
        Smallest PM / (2 pi fc) over the crossovers, s.
    n_crossovers : ndarray of int
        Number of gain crossovers found.
    crossovers_hz : tuple of tuple
        All gain crossovers of each corner.
    conditional : ndarray of bool
        True where a phase crossover with |T| > 1 lies below the last gain
        crossover (the loop is conditionally stable).
    stable : ndarray of bool
        True where every root of 1 + T(s) lies in the open left half plane.
    beyond_grid : ndarray of bool
        True where |T| > 1 at the top of the grid (a crossover may lie above it).
    """

    fc_hz: np.ndarray
    pm_deg: np.ndarray
    gm_db: np.ndarray
    f180_hz: np.ndarray
    gm_low_db: np.ndarray
    delay_margin_s: np.ndarray
    n_crossovers: np.ndarray
    crossovers_hz: tuple
    conditional: np.ndarray
    stable: np.ndarray
    beyond_grid: np.ndarray


def _refine(loop: Rational, corner: np.ndarray, f_lo: np.ndarray, f_hi: np.ndarray, func,
            tol: float, iterations: int = 60) -> np.ndarray:
    """Roots of ``func(sub_loop, f)`` between f_lo and f_hi, in log f (Illinois method).

    ``func`` returns a real residual with opposite signs at the two ends;
    iteration stops when every residual is below ``tol``.
    """
    sub = loop.take(corner)
    a, b = np.log(f_lo), np.log(f_hi)
    fa, fb = func(sub, np.exp(a)), func(sub, np.exp(b))
    side = np.zeros(a.shape, int)
    c = 0.5 * (a + b)
    for _ in range(iterations):
        denom = fb - fa
        c = np.where(denom != 0, b - fb * (b - a) / np.where(denom != 0, denom, 1.0), 0.5 * (a + b))
        c = np.clip(c, np.minimum(a, b), np.maximum(a, b))
        fc = func(sub, np.exp(c))
        if np.all(np.abs(fc) < tol):
            break
        left = np.sign(fc) == np.sign(fa)
        # Illinois: halve the stored residual of the end that survives twice in a row
        fa, fb = np.where(left, fc, np.where(side == -1, fa * 0.5, fa)), np.where(left, np.where(side == 1, fb * 0.5, fb), fc)
        a, b = np.where(left, c, a), np.where(left, b, c)
        side = np.where(left, 1, -1)
    return np.exp(c)


def _log_mag(sub: Rational, f: np.ndarray) -> np.ndarray:
    return np.log(np.abs(sub.response(f[:, None])[:, 0]))


def _brackets(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(corner, index) where ``values`` changes sign between index and index + 1."""
    s = np.sign(values)
    change = (s[:, :-1] * s[:, 1:]) < 0
    return np.nonzero(change)


def loop_margins(loop: Rational, f_hz: np.ndarray, resp: np.ndarray | None = None,
                 phase_deg: np.ndarray | None = None) -> Margins:
    """Margins of the loop gain ``loop`` (T(s), one row per corner).

    Parameters
    ----------
    loop : Rational
        Loop gain per corner, sign convention ``1 + T`` (negative feedback
        included, so a well-designed loop has T(0) > 0).
    f_hz : ndarray (nf,)
        Increasing frequency grid used to bracket the crossings.
    resp, phase_deg : ndarray (corners, nf), optional
        T on the grid and its continuous phase, if already computed.

    Returns
    -------
    Margins

    Notes
    -----
    Phase margin PM = 180 deg + phase(T(j wc)), wrapped to (-180, 180]; gain
    margin GM = -20 log10 |T(j w180)| (Erickson & Maksimovic, Fundamentals of
    Power Electronics, 2nd ed., sec. 9.4).  Delay margin = PM / wc.
    """
    f_hz = np.asarray(f_hz, float)
    n = loop.n_corners
    if resp is None:
        resp = loop.response(f_hz)
    if phase_deg is None:
        phase_deg = loop.phase_deg(f_hz)
    log_mag = np.log(np.abs(resp))

    # ---- gain crossovers
    rows, cols = _brackets(log_mag)
    fc = _refine(loop, rows, f_hz[cols], f_hz[cols + 1], _log_mag, 1e-12) if rows.size else np.zeros(0)
    ph_c = loop.take(rows).phase_deg(fc[:, None])[:, 0] if rows.size else np.zeros(0)
    pm = np.mod(180.0 + ph_c + 180.0, 360.0) - 180.0
    pm = np.where(pm == -180.0, 180.0, pm)

    # ---- phase crossovers: phase = -180 + 360 k
    u = (phase_deg + 180.0) / 360.0
    k_floor = np.floor(u)
    prow, pcol = np.nonzero(k_floor[:, :-1] != k_floor[:, 1:])
    level = 360.0 * np.maximum(k_floor[prow, pcol], k_floor[prow, pcol + 1]) - 180.0
    if prow.size:
        levels = level.copy()

        def phase_residual(sub, f, _lv=levels):
            return sub.phase_deg(f[:, None])[:, 0] - _lv

        f180 = _refine(loop, prow, f_hz[pcol], f_hz[pcol + 1], phase_residual, 1e-9)
        mag180 = np.abs(loop.take(prow).response(f180[:, None])[:, 0])
    else:
        f180 = mag180 = np.zeros(0)

    out_fc = np.full(n, np.nan)
    out_pm = np.full(n, np.nan)
    out_dm = np.full(n, np.nan)
    out_gm = np.full(n, np.inf)
    out_f180 = np.full(n, np.nan)
    out_gml = np.full(n, np.inf)
    n_cross = np.zeros(n, int)
    conditional = np.zeros(n, bool)
    crossings = []
    for i in range(n):
        sel = rows == i
        fci, pmi = fc[sel], pm[sel]
        crossings.append(tuple(float(x) for x in fci))
        n_cross[i] = fci.size
        if fci.size:
            out_fc[i] = fci.min()
            out_pm[i] = pmi.min()
            with np.errstate(divide="ignore"):
                dm = np.deg2rad(pmi) / (2 * np.pi * fci)
            out_dm[i] = dm.min()
        psel = prow == i
        fi, mi = f180[psel], mag180[psel]
        upper = mi < 1.0
        if np.any(upper):
            j = np.argmax(mi * upper)  # the largest |T| below 1: smallest margin
            out_gm[i] = -20.0 * np.log10(mi[j])
            out_f180[i] = fi[j]
        lower = mi > 1.0
        if np.any(lower):
            out_gml[i] = 20.0 * np.log10(np.min(mi[lower]))
            if fci.size and np.any(fi[lower] < fci.max()):
                conditional[i] = True
    poles = loop.closed_loop_poles_hz()
    finite = np.isfinite(poles)
    stable = np.all(~finite | (poles.real < 0), axis=1)
    conditional &= stable  # an unstable loop is reported as unstable, not as conditional
    return Margins(
        fc_hz=out_fc, pm_deg=out_pm, gm_db=out_gm, f180_hz=out_f180, gm_low_db=out_gml,
        delay_margin_s=out_dm, n_crossovers=n_cross, crossovers_hz=tuple(crossings),
        conditional=conditional, stable=stable, beyond_grid=log_mag[:, -1] > 0,
    )
