"""Placement for the worst corner: poles and zeros that keep every corner at its target.

Venable's K-factor places the network for one corner.  Where the corners differ
much (light-load DCM corners, a wide input range without feed-forward, an LC
double pole far below the crossover) a K-factor network that meets the target at
the design corner leaves other corners below it.  This module searches the
network's zeros and poles (log frequency, inside bounds) for the best
worst-corner phase margin, with the gain always putting the crossover of the
design corner at the target:

    maximise   min over corners k of  (PM_k - PM_target)
    subject to every CCM corner crossing within the stated band around fc,
               every gain margin below half the switching frequency >= target,
               one gain crossover per corner.

The evaluation uses the ideal network ``Gc(s) = -A prod(1 + s/wz) / (s prod(1 + s/wp))``
on a coarse grid, vectorised over candidates x corners x frequencies (the
uncompensated loop is fixed), so a few thousand candidates cost tens of
milliseconds: a deterministic space-filling (Halton) set of candidates (including the K-factor
placement and the zeros at the design corner's double pole) is scored at once,
then the best few are refined by Nelder-Mead (scipy.optimize).  The caller
builds the real network from the result and analyses it on the exact loop; this
module only chooses frequencies.

The objective is common practice (no source): a min-max design over operating
points, solved numerically.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SearchResult", "search_placement"]

#: Candidates scored in the first, space-filling pass.
N_CANDIDATES = 256
#: Best candidates refined by Nelder-Mead.
N_REFINE = 1
#: Points of the coarse grid the search scores on (the result is analysed exactly afterwards).
N_GRID = 240
#: Best placements handed back for the exact check (the coarse grid can be wrong near fsw).
N_RETURN = 6
#: Phase-margin headroom over the target (deg) beyond which more margin earns nothing: it covers
#: the E-series rounding of the parts (common practice, no source).
HEADROOM_DEG = 3.0
#: Score per decade that the zeros move up (toward fc): low-frequency loop gain, the tie-breaker.
LF_WEIGHT = 4.0
#: Penalty per unit violation (deg per decade of fc outside the band, per dB of gain margin).
PENALTY = 60.0


@dataclass(frozen=True)
class SearchResult:
    """Best placement found: zeros and poles (Hz) and its worst-corner figures on the coarse grid."""

    zeros_hz: tuple
    poles_hz: tuple
    worst_pm_deg: float
    worst_corner: int
    score: float


def _halton(n: int, d: int) -> np.ndarray:
    """The first ``n`` points of the ``d``-dimensional Halton sequence in [0, 1)^d (deterministic).

    J. H. Halton, "On the efficiency of certain quasi-random sequences of points in evaluating
    multi-dimensional integrals", Numerische Mathematik 2, 1960: radical inverses in the first
    ``d`` prime bases.
    """
    out = np.zeros((n, d))
    index = np.arange(1, n + 1)
    for j, base in enumerate((2, 3, 5, 7, 11, 13)[:d]):
        i, f = index.copy(), np.ones(n)
        while np.any(i > 0):
            f /= base
            out[:, j] += f * (i % base)
            i //= base
    return out


def _score(logz: np.ndarray, logp: np.ndarray, ctx: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(score, worst PM, worst corner) per candidate; ``logz`` (C, nz), ``logp`` (C, np) in log10 Hz."""
    f = ctx["f"]  # (F,)
    zf = 10.0 ** logz
    pf = 10.0 ** logp
    # network magnitude (log10) and phase (deg) without gain, (C, F)
    ratio_z = f[None, None, :] / zf[:, :, None]
    ratio_p = f[None, None, :] / pf[:, :, None]
    log_mag = 0.5 * np.log10(1 + ratio_z ** 2).sum(axis=1) - 0.5 * np.log10(1 + ratio_p ** 2).sum(axis=1)
    phase = np.degrees(np.arctan(ratio_z).sum(axis=1) - np.arctan(ratio_p).sum(axis=1))
    # gain so that the design corner crosses at fc (its |Gc| at fc from the same expression)
    rz = ctx["fc"] / zf
    rp = ctx["fc"] / pf
    log_gc_fc = 0.5 * np.log10(1 + rz ** 2).sum(axis=1) - 0.5 * np.log10(1 + rp ** 2).sum(axis=1)
    log_a = -ctx["log_tu_fc"] - log_gc_fc  # (C,)
    lm = ctx["tu_logmag"][None, :, :] + (log_mag + log_a[:, None])[:, None, :]  # (C, K, F)
    ph = ctx["tu_phase"][None, :, :] + phase[:, None, :]  # continuous phase of T, deg
    above = lm > 0
    cross = above[..., :-1] & ~above[..., 1:]  # downward gain crossings
    up = ~above[..., :-1] & above[..., 1:]
    n_cross = cross.sum(axis=-1) + up.sum(axis=-1)
    # PM at the crossings: interpolate the phase linearly in the bracket
    t = lm[..., :-1] / np.where(cross, lm[..., :-1] - lm[..., 1:], 1.0)
    ph_c = ph[..., :-1] + t * (ph[..., 1:] - ph[..., :-1])
    pm_c = np.mod(ph_c + 360.0, 360.0) - 180.0  # 180 deg + phase, wrapped to [-180, 180)
    pm = np.where(cross, pm_c, np.inf).min(axis=-1)  # (C, K)
    pm = np.where(np.isfinite(pm), pm, -90.0)  # no crossover at all: as bad as it gets
    # crossover frequency of each corner (the first downward crossing)
    first = np.argmax(cross, axis=-1)
    fc_k = ctx["f"][first]
    lo, hi = ctx["fc"] / ctx["band"], ctx["fc"] * ctx["band"]
    band_miss = np.where(ctx["ccm"][None, :],
                         np.maximum(np.log10(lo / fc_k), 0) + np.maximum(np.log10(fc_k / hi), 0), 0.0)
    # gain margin: |T| at the phase crossings (-180 + 360 m) below the model's limit, above the last crossover
    wrap = np.floor((ph + 180.0) / 360.0)
    pcross = (wrap[..., :-1] != wrap[..., 1:]) & ctx["in_model"][None, None, :-1]
    last_gc = ctx["f"].size - 1 - np.argmax(cross[..., ::-1], axis=-1)
    after = np.arange(ctx["f"].size - 1)[None, None, :] >= last_gc[..., None]
    gm = np.where(pcross & after, -20.0 * lm[..., :-1], np.inf).min(axis=-1)
    gm_miss = np.maximum(ctx["gm_target"] - gm, 0.0)
    extra = np.maximum(n_cross - 1, 0)
    margin = pm - ctx["pm_target"]
    worst_k = np.argmin(margin, axis=1)
    worst = margin[np.arange(margin.shape[0]), worst_k]
    # past a small headroom over the target, prefer higher zeros: more loop gain below the crossover
    lf_gain = LF_WEIGHT * np.log10(zf / ctx["fc"]).mean(axis=1)
    score = (np.minimum(worst, HEADROOM_DEG) + lf_gain - PENALTY * band_miss.sum(axis=1) - (PENALTY / 10.0) * gm_miss.sum(axis=1)
             - PENALTY * extra.sum(axis=1))
    return score, worst + ctx["pm_target"], worst_k


def search_placement(t0_resp: np.ndarray, t0_phase_deg: np.ndarray, f_hz: np.ndarray, *, n_zeros: int,
                     n_poles: int, fc_hz: float, pm_deg: float, gm_db: float, fc_band: float,
                     design_corner: int, ccm: np.ndarray, model_limit_hz: float, zero_bounds_hz: tuple,
                     pole_bounds_hz: tuple, starts: list[tuple[tuple, tuple]]) -> list[SearchResult]:
    """Zeros and poles (Hz) maximising the worst-corner phase margin of the ideal network.

    Parameters
    ----------
    t0_resp, t0_phase_deg : ndarray (corners, nf)
        The loop with a bare unit integrator as the network (``Gc = -1/s``), and its
        continuous phase, on ``f_hz``: the network's zeros, poles and gain multiply it.
    n_zeros, n_poles : int
        Network zeros and non-origin poles (Type II: 1, 1; Type III: 2, 2).
    fc_hz, pm_deg, gm_db, fc_band : float
        Targets: crossover at the design corner, phase margin at every corner, gain margin,
        and the band (factor) every CCM corner's crossover must stay within.
    design_corner : int
        The corner whose crossover the gain puts at ``fc_hz``.
    ccm : ndarray of bool (corners,)
        Corners the crossover band applies to.
    model_limit_hz : float
        Phase crossings above this (fsw/2) do not count for the gain margin.
    zero_bounds_hz, pole_bounds_hz : (float, float)
        Search box for the zeros and the poles.
    starts : list of (zeros, poles)
        Placements always scored (e.g. the K-factor one).

    Returns
    -------
    list of SearchResult
        The best placements found, best first (the refined ones and the best of the
        space-filling pass), for the caller to check on the exact loop.
    """
    from scipy.optimize import minimize

    f = np.geomspace(f_hz[0], f_hz[-1], N_GRID)
    # the uncompensated loop on the coarse grid: interpolate log|Tu| and phase in log f (smooth curves)
    lf, lgrid = np.log(f), np.log(f_hz)
    tu_log = np.log10(np.abs(t0_resp))
    tu_logmag = np.stack([np.interp(lf, lgrid, row) for row in tu_log])
    tu_phase = np.stack([np.interp(lf, lgrid, row) for row in t0_phase_deg])
    tu_fc = np.interp(np.log(fc_hz), lgrid, tu_log[design_corner])
    ctx = {"f": f, "fc": fc_hz, "band": fc_band, "tu_logmag": tu_logmag, "tu_phase": tu_phase,
           "log_tu_fc": tu_fc, "ccm": np.asarray(ccm, bool), "in_model": f <= model_limit_hz,
           "gm_target": gm_db, "pm_target": pm_deg}
    lo = np.log10([zero_bounds_hz[0]] * n_zeros + [pole_bounds_hz[0]] * n_poles)
    hi = np.log10([zero_bounds_hz[1]] * n_zeros + [pole_bounds_hz[1]] * n_poles)
    sample = _halton(N_CANDIDATES, n_zeros + n_poles)
    cand = lo + sample * (hi - lo)
    start_rows = [np.log10(np.r_[z, p]) for z, p in starts if len(z) == n_zeros and len(p) == n_poles]
    if start_rows:
        cand = np.vstack([np.clip(np.array(start_rows), lo, hi), cand])
    score, _, _ = _score(cand[:, :n_zeros], cand[:, n_zeros:], ctx)

    def objective(x):
        x = np.clip(x, lo, hi)
        return -float(_score(x[None, :n_zeros], x[None, n_zeros:], ctx)[0][0])

    found = [cand[i] for i in np.argsort(score)[::-1][:N_RETURN]]
    for x0 in found[:N_REFINE]:
        res = minimize(objective, x0, method="Nelder-Mead", options={"xatol": 1e-3, "fatol": 1e-2, "maxfev": 120})
        found.insert(0, np.clip(res.x, lo, hi))
    out = []
    for x in found:
        s, worst_pm, worst_k = _score(x[None, :n_zeros], x[None, n_zeros:], ctx)
        out.append(SearchResult(tuple(sorted(float(v) for v in 10.0 ** x[:n_zeros])),
                                tuple(sorted(float(v) for v in 10.0 ** x[n_zeros:])),
                                float(worst_pm[0]), int(worst_k[0]), float(s[0])))
    return sorted(out, key=lambda r: -r.score)
