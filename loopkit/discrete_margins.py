"""Margins of a sampled loop on the unit circle, up to the Nyquist frequency.

The same procedure and the same :class:`loopkit.margins.Margins` fields as the
analog :func:`loopkit.margins.loop_margins`: a grid (ending at fs/2) brackets
every gain crossover (|T| = 1) and phase crossover (phase = -180 deg + k 360
deg); each is refined on the exact factored T(z) by safeguarded Newton steps in
ln f with the exact derivative (:meth:`Discrete.local`); pairs hidden inside one
grid step are found at local extrema.  Closed-loop stability comes from the
z-plane roots of 1 + T(z) (all strictly inside the unit circle), never from the
margins.

At fs/2 a real-coefficient T(z) is real (z = -1), so its phase there is a
multiple of 180 deg exactly; a loop whose phase reaches -180 deg just at fs/2
has its phase crossover there and the gain margin -20 log10 |T(-1)|.
"""

from __future__ import annotations

import numpy as np

from .discrete import Discrete
from .errors import DesignError
from .margins import Margins, _hidden_pairs, _refine

__all__ = ["discrete_loop_margins"]


def _check_grid(f_hz: np.ndarray, nyquist_hz: float) -> None:
    if f_hz.ndim != 1 or f_hz.size < 3 or not np.all(np.isfinite(f_hz)) or f_hz[0] <= 0:
        raise DesignError("f_hz", f_hz.tolist()[:3], "at least 3 finite frequencies > 0, Hz")
    if np.any(np.diff(f_hz) <= 0):
        raise DesignError("f_hz", "not increasing", "an increasing frequency grid")
    if f_hz[-1] > nyquist_hz * (1 + 1e-12):
        raise DesignError("f_hz", float(f_hz[-1]), f"the grid must end at or below fs/2 = {nyquist_hz:g} Hz")


def discrete_loop_margins(loop: Discrete, f_hz, resp: np.ndarray | None = None,
                          phase_deg: np.ndarray | None = None) -> Margins:
    """Margins of the sampled loop gain ``loop`` (T(z), one row per corner) up to fs/2.

    Parameters
    ----------
    loop : Discrete
        Loop gain per corner, sign convention ``1 + T`` as in
        :func:`loopkit.margins.loop_margins`.
    f_hz : ndarray (nf,)
        Increasing frequency grid, ending at (or below) the Nyquist frequency
        ``0.5 / loop.ts_s`` (:func:`loopkit.discrete.nyquist_grid`); it only brackets the crossings.
    resp, phase_deg : ndarray (corners, nf), optional
        T on the grid and its continuous phase, if already computed.

    Returns
    -------
    Margins
        The analog loop's fields.  ``beyond_grid`` is True where |T| > 1 at
        the end of the grid; nothing lies beyond the Nyquist frequency, so
        ``gm_beyond_model`` is False and ``f180_beyond_hz`` NaN.  ``stable``
        comes from the z-plane roots of 1 + T(z).

    Notes
    -----
    PM = 180 deg + phase T(e^{j wc Ts}) wrapped to (-180, 180]; GM = -20 log10
    |T(e^{j w180 Ts})| (Erickson & Maksimovic, Fundamentals of Power
    Electronics, 2nd ed., sec. 9.4, on the unit circle instead of the j-axis:
    G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic
    Systems, 3rd ed., 1998, ch. 7, from memory).  Delay margin = PM / wc, s.
    """
    f_hz = np.asarray(f_hz, float)
    _check_grid(f_hz, loop.nyquist_hz)
    n = loop.n_corners
    resp = loop.response(f_hz) if resp is None else resp
    phase_deg = loop.phase_deg(f_hz) if phase_deg is None else phase_deg
    with np.errstate(divide="ignore"):
        log_mag = np.log(np.abs(resp))
    at_nyquist = abs(f_hz[-1] - loop.nyquist_hz) <= 1e-12 * loop.nyquist_hz
    if at_nyquist:
        # T(-1) is real: snap the last phase to its multiple of 180 deg and, if that is a -180 + 360 k
        # level, put it just past the level on the far side from the previous point so the crossing
        # ending exactly at fs/2 is bracketed (refinement then converges onto fs/2)
        last = 180.0 * np.round(phase_deg[:, -1] / 180.0)
        on_level = np.isclose(np.mod(last + 180.0, 360.0), 0.0) | np.isclose(np.mod(last + 180.0, 360.0), 360.0)
        nudge = np.where(phase_deg[:, -2] > last, -1e-9, 1e-9)
        phase_deg = phase_deg.copy()
        phase_deg[:, -1] = np.where(on_level, last + nudge, phase_deg[:, -1])

    # ---- gain crossovers
    finite = np.isfinite(log_mag)
    lm = np.where(finite, log_mag, -745.0)
    rows, cols = np.nonzero(np.sign(lm[:, :-1]) * np.sign(lm[:, 1:]) < 0)
    b_rows, f_lo, f_hi = rows, f_hz[cols], f_hz[cols + 1]
    g_lo, g_hi = lm[rows, cols], lm[rows, cols + 1]
    extra = _hidden_pairs(loop, f_hz, lm, "gain", np.zeros_like)
    if extra is not None:
        b_rows, f_lo, f_hi = np.r_[b_rows, extra[0]], np.r_[f_lo, extra[1]], np.r_[f_hi, extra[2]]
        g_lo, g_hi = np.r_[g_lo, extra[3]], np.r_[g_hi, extra[4]]
        order = np.lexsort((f_lo, b_rows))
        b_rows, f_lo, f_hi, g_lo, g_hi = b_rows[order], f_lo[order], f_hi[order], g_lo[order], g_hi[order]
    rows = b_rows
    fc = _refine(loop, rows, f_lo, f_hi, g_lo, g_hi, "gain") if rows.size else np.zeros(0)
    ph_c = np.degrees(loop.take(rows).local(fc, "phase")[0]) if rows.size else np.zeros(0)
    pm = np.mod(180.0 + ph_c + 180.0, 360.0) - 180.0
    pm = np.where(pm == -180.0, 180.0, pm)

    # ---- phase crossovers: phase = -180 + 360 k
    k_floor = np.floor((phase_deg + 180.0) / 360.0)
    prow, pcol = np.nonzero(k_floor[:, :-1] != k_floor[:, 1:])
    level = 360.0 * np.maximum(k_floor[prow, pcol], k_floor[prow, pcol + 1]) - 180.0
    ph, lv = np.radians(phase_deg), np.radians(level)
    p_lo, p_hi, pg_lo, pg_hi = f_hz[pcol], f_hz[pcol + 1], ph[prow, pcol] - lv, ph[prow, pcol + 1] - lv
    extra = _hidden_pairs(loop, f_hz, ph, "phase",
                          lambda v: np.radians(360.0 * np.round((np.degrees(v) + 180.0) / 360.0) - 180.0))
    if extra is not None:
        prow, p_lo, p_hi = np.r_[prow, extra[0]], np.r_[p_lo, extra[1]], np.r_[p_hi, extra[2]]
        pg_lo, pg_hi, lv = np.r_[pg_lo, extra[3]], np.r_[pg_hi, extra[4]], np.r_[lv, extra[5]]
    if prow.size:
        f180 = _refine(loop, prow, p_lo, p_hi, pg_lo, pg_hi, "phase", lv)
        if at_nyquist:
            f180 = np.minimum(f180, loop.nyquist_hz)
        mag180 = np.abs(loop.take(prow).response(f180[:, None])[:, 0])
    else:
        f180 = mag180 = np.zeros(0)

    n_cross = np.bincount(rows, minlength=n)
    out_fc, out_pm, out_dm = np.full(n, np.inf), np.full(n, np.inf), np.full(n, np.inf)
    fc_max = np.full(n, -np.inf)
    if rows.size:
        np.minimum.at(out_fc, rows, fc)
        np.maximum.at(fc_max, rows, fc)
        np.minimum.at(out_pm, rows, pm)
        np.minimum.at(out_dm, rows, np.deg2rad(pm) / (2 * np.pi * fc))
    none = n_cross == 0
    out_fc[none], out_pm[none], out_dm[none] = np.nan, np.nan, np.nan
    crossings = tuple(tuple(float(x) for x in part) for part in np.split(fc, np.cumsum(n_cross)[:-1]))
    out_gm, out_f180, out_gml = np.full(n, np.inf), np.full(n, np.nan), np.full(n, np.inf)
    conditional = np.zeros(n, bool)
    if prow.size:
        pick = mag180 < 1.0
        if np.any(pick):
            r, m, fr = prow[pick], mag180[pick], f180[pick]
            order = np.lexsort((m, r))  # by corner, then |T| ascending: the last of each corner wins
            r, m, fr = r[order], m[order], fr[order]
            last = np.r_[r[1:] != r[:-1], True]
            out_gm[r[last]] = -20.0 * np.log10(m[last])
            out_f180[r[last]] = fr[last]
        lower = mag180 > 1.0
        if np.any(lower):
            np.minimum.at(out_gml, prow[lower], 20.0 * np.log10(mag180[lower]))
            conditional[prow[lower & (f180 < fc_max[prow])]] = True
    stable = loop.closed_loop_stable()
    conditional &= stable
    return Margins(
        fc_hz=out_fc, pm_deg=out_pm, gm_db=out_gm, f180_hz=out_f180, gm_low_db=out_gml,
        delay_margin_s=out_dm, n_crossovers=n_cross, crossovers_hz=crossings,
        conditional=conditional, stable=stable, beyond_grid=lm[:, -1] > 0,
        gm_beyond_model=np.zeros(n, bool), f180_beyond_hz=np.full(n, np.nan),
    )
