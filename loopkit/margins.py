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

__all__ = ["GM_WORDS", "Margins", "gm_state", "loop_margins"]

#: How a gain margin that is not a number is written, in the CLI, the JSON (``gm_state``) and the app alike.
GM_WORDS = {"none": "none", "beyond-model": ">fsw/2"}


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
    gm_beyond_model : ndarray of bool
        True where a phase crossover with |T| < 1 lies above the model's limit
        (``model_limit_hz`` of :func:`loop_margins`, half the switching
        frequency for the averaged models) and would set a smaller gain margin
        than ``gm_db``: the model cannot predict that margin, so it is not
        reported as a number (``gm_db`` and ``f180_hz`` come from the phase
        crossovers below the limit only).
    f180_beyond_hz : ndarray
        That phase crossover above the limit; NaN where there is none.
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
    gm_beyond_model: np.ndarray
    f180_beyond_hz: np.ndarray


def gm_state(m: Margins) -> np.ndarray:
    """Per corner: ``"number"`` (``gm_db`` is the gain margin), ``"none"`` (the phase never
    reaches -180 deg with |T| < 1 below the model's limit) or ``"beyond-model"`` (it does only above
    half the switching frequency, where the averaged model does not predict it)."""
    return np.where(m.gm_beyond_model, "beyond-model", np.where(np.isfinite(m.gm_db), "number", "none"))


def _local(sub: Rational, f: np.ndarray, which: str) -> tuple[np.ndarray, np.ndarray]:
    """ln|T| (``which="gain"``) or the continuous phase in rad (``"phase"``) at one
    frequency per row of ``sub``, with its derivative with respect to ln f.

    d ln T / d ln f = sum over numerator factors of a1 s / (a0 + a1 s), minus the
    same over the denominator, minus s times the delay: its real part is the
    slope of ln|T|, its imaginary part the slope of the phase.
    """
    s = (1j * 2.0 * np.pi * f)[:, None]
    tn = sub.num[:, :, 0] + sub.num[:, :, 1] * s
    td = sub.den[:, :, 0] + sub.den[:, :, 1] * s
    slope = (sub.num[:, :, 1] * s / tn).sum(axis=1) - (sub.den[:, :, 1] * s / td).sum(axis=1) - s[:, 0] * sub.delay_s
    if which == "gain":
        value = np.log(np.abs(sub.gain)) + np.log(np.abs(tn)).sum(axis=1) - np.log(np.abs(td)).sum(axis=1)
        return value, slope.real
    value = (np.angle(tn).sum(axis=1) - np.angle(td).sum(axis=1) + np.where(sub.gain < 0, -np.pi, 0.0)
             - s[:, 0].imag * sub.delay_s)
    return value, slope.imag


def _evaluate(sub, f: np.ndarray, which: str) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_local` of a :class:`Rational`, or the ``local`` method of a loop type that has one
    (the sampled loop's :class:`loopkit.discrete.Discrete`): the refinements below serve both."""
    local = getattr(sub, "local", None)
    return local(f, which) if local is not None else _local(sub, f, which)


def _refine(loop: Rational, corner: np.ndarray, f_lo: np.ndarray, f_hi: np.ndarray, g_lo: np.ndarray,
            g_hi: np.ndarray, which: str, level: np.ndarray | float = 0.0, tol: float = 1e-11,
            iterations: int = 30) -> np.ndarray:
    """Solve ln|T| = 0 (``which="gain"``) or phase = level rad (``"phase"``) inside each bracket.

    ``g_lo``, ``g_hi`` are the residuals at the bracket ends (from the grid).
    Safeguarded Newton in u = ln f with the exact derivative (:func:`_local`): a
    step that leaves the bracket is replaced by bisection, and the bracket
    shrinks around the sign change.  Stops when every step is below ``tol``
    (relative frequency).
    """
    sub = loop.take(corner)
    a, b = np.log(f_lo), np.log(f_hi)
    ga = g_lo
    u = np.where(g_hi != g_lo, a - g_lo * (b - a) / np.where(g_hi != g_lo, g_hi - g_lo, 1.0), 0.5 * (a + b))
    for _ in range(iterations):
        g, dg = _evaluate(sub, np.exp(u), which)
        g = g - level
        same = np.sign(g) == np.sign(ga)
        a, ga, b = np.where(same, u, a), np.where(same, g, ga), np.where(same, b, u)
        new = u - g / np.where(dg != 0, dg, np.inf)
        outside = ~((new > np.minimum(a, b)) & (new < np.maximum(a, b)))
        new = np.where(outside, 0.5 * (a + b), new)
        done = (np.abs(new - u) < tol) | (g == 0)
        u = np.where(g == 0, u, new)  # an exact root stays where it is
        if done.all():
            break
    return np.exp(u)


def _brackets(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(corner, index) where ``values`` changes sign between index and index + 1."""
    s = np.sign(values)
    return np.nonzero((s[:, :-1] * s[:, 1:]) < 0)


def _hidden_pairs(loop: Rational, f_hz: np.ndarray, values: np.ndarray, which: str, level_of) -> tuple:
    """Pairs of crossings that fall between two grid points around a local extremum.

    A resonant peak that just touches 0 dB (or a phase bump that just reaches
    -180 deg) can cross twice within one grid step, with the same sign at both
    grid points.  At every interior local extremum of ``values`` the exact
    extremum is located (bisection on the sign of the exact slope) and, if it
    lies on the other side of the level, the two half-intervals are returned
    as brackets: (rows, f_lo, f_hi, g_lo, g_hi, level).
    """
    d = np.diff(values, axis=1)
    turn = np.sign(d[:, :-1]) * np.sign(d[:, 1:]) < 0
    rows, mid = np.nonzero(turn)
    mid = mid + 1
    if rows.size == 0:
        return None
    level = level_of(values[rows, mid])
    near = np.abs(values[rows, mid] - level) < 3.0 * (np.abs(d[rows, mid - 1]) + np.abs(d[rows, mid])) + 1e-12
    same_side = np.sign(values[rows, mid - 1] - level) == np.sign(values[rows, mid + 1] - level)
    keep = near & same_side
    if not np.any(keep):
        return None
    rows, mid, level = rows[keep], mid[keep], level[keep]
    sub = loop.take(rows)
    a, b = np.log(f_hz[mid - 1]), np.log(f_hz[mid + 1])
    _, slope_a = _evaluate(sub, np.exp(a), which)
    for _ in range(50):
        c = 0.5 * (a + b)
        _, sc = _evaluate(sub, np.exp(c), which)
        same = np.sign(sc) == np.sign(slope_a)
        a, slope_a, b = np.where(same, c, a), np.where(same, sc, slope_a), np.where(same, b, c)
    f_ext = np.exp(0.5 * (a + b))
    g_ext = _evaluate(sub, f_ext, which)[0] - level
    g_side = values[rows, mid - 1] - level
    hidden = np.sign(g_ext) != np.sign(g_side)
    if not np.any(hidden):
        return None
    r, m, fe, ge, lv = rows[hidden], mid[hidden], f_ext[hidden], g_ext[hidden], level[hidden]
    g_lo, g_hi = values[r, m - 1] - lv, values[r, m + 1] - lv
    return (np.r_[r, r], np.r_[f_hz[m - 1], fe], np.r_[fe, f_hz[m + 1]], np.r_[g_lo, ge], np.r_[ge, g_hi], np.r_[lv, lv])


def loop_margins(loop: Rational, f_hz: np.ndarray, resp: np.ndarray | None = None,
                 phase_deg: np.ndarray | None = None, model_limit_hz: float = np.inf) -> Margins:
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
    model_limit_hz : float, optional
        Frequency above which the loop model does not hold (half the switching
        frequency for an averaged model): a phase crossover above it gives no
        gain margin, only the flag ``gm_beyond_model``.

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
    b_rows, f_lo, f_hi = rows, f_hz[cols], f_hz[cols + 1]
    g_lo, g_hi = log_mag[rows, cols], log_mag[rows, cols + 1]
    extra = _hidden_pairs(loop, f_hz, log_mag, "gain", np.zeros_like)
    if extra is not None:
        b_rows, f_lo, f_hi = np.r_[b_rows, extra[0]], np.r_[f_lo, extra[1]], np.r_[f_hi, extra[2]]
        g_lo, g_hi = np.r_[g_lo, extra[3]], np.r_[g_hi, extra[4]]
        order = np.lexsort((f_lo, b_rows))
        b_rows, f_lo, f_hi, g_lo, g_hi = b_rows[order], f_lo[order], f_hi[order], g_lo[order], g_hi[order]
    rows = b_rows
    fc = _refine(loop, rows, f_lo, f_hi, g_lo, g_hi, "gain") if rows.size else np.zeros(0)
    ph_c = loop.take(rows).phase_deg(fc[:, None])[:, 0] if rows.size else np.zeros(0)
    pm = np.mod(180.0 + ph_c + 180.0, 360.0) - 180.0
    pm = np.where(pm == -180.0, 180.0, pm)

    # ---- phase crossovers: phase = -180 + 360 k
    u = (phase_deg + 180.0) / 360.0
    k_floor = np.floor(u)
    prow, pcol = np.nonzero(k_floor[:, :-1] != k_floor[:, 1:])
    level = 360.0 * np.maximum(k_floor[prow, pcol], k_floor[prow, pcol + 1]) - 180.0
    ph = np.radians(phase_deg)
    lv = np.radians(level)
    p_lo, p_hi, pg_lo, pg_hi = f_hz[pcol], f_hz[pcol + 1], ph[prow, pcol] - lv, ph[prow, pcol + 1] - lv
    extra = _hidden_pairs(loop, f_hz, ph, "phase", lambda v: np.radians(360.0 * np.round((np.degrees(v) + 180.0) / 360.0) - 180.0))
    if extra is not None:
        prow, p_lo, p_hi = np.r_[prow, extra[0]], np.r_[p_lo, extra[1]], np.r_[p_hi, extra[2]]
        pg_lo, pg_hi, lv = np.r_[pg_lo, extra[3]], np.r_[pg_hi, extra[4]], np.r_[lv, extra[5]]
    if prow.size:
        f180 = _refine(loop, prow, p_lo, p_hi, pg_lo, pg_hi, "phase", lv)
        mag180 = np.abs(loop.take(prow).response(f180[:, None])[:, 0])
    else:
        f180 = mag180 = np.zeros(0)

    n_cross = np.bincount(rows, minlength=n)
    out_fc = np.full(n, np.inf)
    out_pm = np.full(n, np.inf)
    out_dm = np.full(n, np.inf)
    fc_max = np.full(n, -np.inf)
    if rows.size:
        np.minimum.at(out_fc, rows, fc)
        np.maximum.at(fc_max, rows, fc)
        np.minimum.at(out_pm, rows, pm)
        np.minimum.at(out_dm, rows, np.deg2rad(pm) / (2 * np.pi * fc))
    none = n_cross == 0
    out_fc[none], out_pm[none], out_dm[none] = np.nan, np.nan, np.nan
    ends = np.cumsum(n_cross).tolist()
    fc_list = np.asarray(fc, float).tolist()  # Python floats; slicing a list keeps many rows cheap
    crossings = tuple(tuple(fc_list[a:b]) for a, b in zip([0, *ends[:-1]], ends))
    # gain margin: the phase crossover with the largest |T| below 1 (smallest margin)
    out_gm = np.full(n, np.inf)
    out_f180 = np.full(n, np.nan)
    out_gml = np.full(n, np.inf)
    conditional = np.zeros(n, bool)
    beyond_gm = np.full(n, np.inf)
    out_f180_beyond = np.full(n, np.nan)
    if prow.size:
        upper = mag180 < 1.0
        for inside, gm_out, f_out in ((f180 <= model_limit_hz, out_gm, out_f180),
                                      (f180 > model_limit_hz, beyond_gm, out_f180_beyond)):
            pick = upper & inside
            if np.any(pick):
                r, m, fr = prow[pick], mag180[pick], f180[pick]
                order = np.lexsort((m, r))  # by corner, then |T| ascending: the last of each corner wins
                r, m, fr = r[order], m[order], fr[order]
                last = np.r_[r[1:] != r[:-1], True]
                gm_out[r[last]] = -20.0 * np.log10(m[last])
                f_out[r[last]] = fr[last]
        lower = mag180 > 1.0
        if np.any(lower):
            np.minimum.at(out_gml, prow[lower], 20.0 * np.log10(mag180[lower]))
            below = lower & (f180 < fc_max[prow])
            conditional[prow[below]] = True
    poles = loop.closed_loop_poles_hz()
    finite = np.isfinite(poles)
    stable = np.all(~finite | (poles.real < 0), axis=1)
    conditional &= stable  # an unstable loop is reported as unstable, not as conditional
    return Margins(
        fc_hz=out_fc, pm_deg=out_pm, gm_db=out_gm, f180_hz=out_f180, gm_low_db=out_gml,
        delay_margin_s=out_dm, n_crossovers=n_cross, crossovers_hz=tuple(crossings),
        conditional=conditional, stable=stable, beyond_grid=log_mag[:, -1] > 0,
        gm_beyond_model=beyond_gm < out_gm, f180_beyond_hz=np.where(beyond_gm < out_gm, out_f180_beyond, np.nan),
    )
