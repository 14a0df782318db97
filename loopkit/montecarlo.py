"""Tolerance studies: Monte Carlo yield, sensitivity and the extreme-value worst case.

A study starts from a design whose compensator has parts (given, or synthesised and snapped to
the E-series by the ordinary path) and the quantities its ``[tolerances]`` vary
(:func:`loopkit.tolerances.quantities`).  Peak current mode keeps the slope compensation the
nominal design gets (the ramp is a part, built once).  Every draw's margins at every corner come
from :func:`loopkit.rows.row_margins`, the one path over rows.

* :func:`monte_carlo`: N draws from a given random state; a draw *passes* when every corner meets
  every target with the verdict's rules (:func:`meets_targets`); the yield with its Wilson score
  and Clopper-Pearson intervals; the worst-corner PM, GM and fc of every draw.
* :func:`sensitivity`: one quantity at a time at each of its limits, the others nominal; the
  change of the worst-corner PM (and, given a Monte Carlo run, Spearman's rank correlation of
  each quantity's draws with the worst-corner PM).
* :func:`worst_case`: the vertices of the tolerance box (all of them up to
  :data:`MAX_VERTEX_QUANTITIES` quantities; beyond, the vertex the one-at-a-time signs point to
  and its one-flip neighbours), then a coordinate search over each quantity's range from the
  worst vertex.

Chunks of draws are a pure function of (design, quantities, draws, grid): :func:`monte_carlo`
runs them in this process, a process pool (``workers``) or on a Dask cluster (``client``).

A digital design has no network parts: its controller ``C(z)`` is what stays fixed
(``Study.controller``, :func:`loopkit.rows.fixed_controller`: the fixed-point one firmware runs where
the realisation exists, else the exact one; ``Study.controller_note`` says which), the plant's
quantities vary as for an analog design, and the study's grid ends at fs/2 (the margins are those of
the sampled loop on the unit circle).
"""

from __future__ import annotations

import itertools
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, replace

import numpy as np

from .design import Design
from .errors import DesignError
from .loop import LoopSession
from .result import Targets
from .rows import (
    MEMORY_BUDGET_BYTES,
    RowMargins,
    bytes_per_row_point,
    chunk_margins,
    draws_per_chunk,
    fixed_controller,
    is_digital,
    row_loop,
    row_margins,
)
from .tolerances import Tolerances, draw_values, quantities, temperature_factors

__all__ = [
    "MAX_VERTEX_QUANTITIES",
    "POINTS_PER_DECADE",
    "MonteCarloResult",
    "Sensitivity",
    "Study",
    "WorstCase",
    "clopper_pearson_interval",
    "loop_envelope",
    "meets_targets",
    "monte_carlo",
    "prepare_study",
    "sensitivity",
    "study_margins",
    "wilson_interval",
    "worst_case",
    "worst_corner",
]

#: Grid density of a study, points per decade over the design's own analysis range: the grid
#: only brackets the crossings, which are refined on the exact loop.
POINTS_PER_DECADE = 24

#: Up to this many quantities the worst case visits every vertex of the tolerance box.
MAX_VERTEX_QUANTITIES = 12

#: Slack of the verdict's margin checks (:func:`loopkit.verdict.verdict_findings`), deg and dB.
_SLACK = 0.05


@dataclass(frozen=True)
class Study:
    """What every study of one design shares.

    Attributes
    ----------
    design : Design
        With the compensator's parts (and peak current mode's slope) fixed.
    quantities : list of Quantity
        What varies, with its limits.
    f_hz : ndarray
        The study's frequency grid, Hz.
    targets : Targets
    nominal : RowMargins
        Margins of the nominal values (one draw).
    factors : ndarray (temperatures, quantities)
        Each temperature corner's multipliers on the values (one row of ones without corners);
        a draw's margins cover every operating corner at every temperature corner, temperature
        outermost: column ``t * n_corners + c``.
    temperatures : tuple of str
        The temperature corners' names (empty without).
    controller : Discrete or None
        A digital design's fixed ``C(z)`` (None for an analog network).
    controller_note : str
        Which controller that is (empty for an analog network).
    """

    design: Design
    quantities: list
    f_hz: np.ndarray
    targets: Targets
    nominal: RowMargins
    factors: np.ndarray = None
    temperatures: tuple = ()
    controller: object = None
    controller_note: str = ""

    @property
    def nominal_values(self) -> np.ndarray:
        return np.array([q.nominal for q in self.quantities])

    @property
    def n_corners(self) -> int:
        return self.design.operating.n_corners

    def expand(self, values: np.ndarray) -> np.ndarray:
        """Draws (n, q) as rows at every temperature corner, (n * temperatures, q), draw outermost."""
        values = np.atleast_2d(np.asarray(values, float))
        n = values.shape[0] * self.factors.shape[0]
        return (values[:, None, :] * self.factors[None, :, :]).reshape(n, values.shape[1])


def _fold(m: RowMargins, n_draws: int) -> RowMargins:
    """Margins of (draw, temperature) rows as (draws, temperatures x corners)."""
    return RowMargins(**{k: getattr(m, k).reshape(n_draws, -1) for k in RowMargins.__annotations__})


def _chunk(design, qs, values, f_hz, factors, controller=None) -> RowMargins:
    """One chunk of draws at every temperature corner (a pure function: runs in any process)."""
    expanded = (values[:, None, :] * factors[None, :, :]).reshape(values.shape[0] * factors.shape[0], values.shape[1])
    return _fold(chunk_margins(design, qs, expanded, f_hz, controller), values.shape[0])


def study_margins(study: Study, values: np.ndarray, budget_bytes: int = MEMORY_BUDGET_BYTES) -> RowMargins:
    """Margins of draws at every operating and temperature corner, (draws, temperatures x corners)."""
    values = np.atleast_2d(np.asarray(values, float))
    return _fold(row_margins(study.design, study.quantities, study.expand(values), study.f_hz, budget_bytes,
                             controller=study.controller), values.shape[0])


def prepare_study(design: Design, tolerances: Tolerances | None = None,
                  points_per_decade: int = POINTS_PER_DECADE) -> Study:
    """The design with its parts fixed, the varied quantities and the grid.

    Parameters
    ----------
    design : Design
        Parts given in ``[compensator.parts]`` are studied as they are; otherwise the network is
        synthesised for the design's targets and snapped to its E-series first.
    tolerances : Tolerances, optional
        Default ``design.tolerances``.

    Raises
    ------
    DesignError
        No parts (the targets cannot be met at nominal values: the study has nothing to vary
        about), tolerances that do not fit the design (a digital design: entries for network
        parts or an amplifier), or nothing to vary.
    """
    tolerances = design.tolerances if tolerances is None else tolerances
    if is_digital(design):
        _check_digital_tolerances(tolerances)
    session = LoopSession(design)
    result = session.run()
    if not result.feasible:
        reason = next((f.message for f in result.findings if f.code == "infeasible"), "no parts")
        raise DesignError("compensator", design.compensator.network, f"a study needs parts: {reason}")
    comp = replace(result.design.compensator, parts=dict(result.parts))
    fixed = replace(result.design, compensator=comp, tolerances=tolerances)
    if fixed.control.scheme == "peak-current":
        from .schemes.peak_current import slope_of

        se = slope_of(fixed, session.stage)
        fixed = replace(fixed, control=replace(fixed.control, slope=se, slope_amplitude=None, slope_ratio=None))
    qs = quantities(fixed, fixed.tolerances, comp.parts)
    if not qs:
        raise DesignError("tolerances", "(none)", "a study needs something to vary: give a [tolerances] table"
                          " (e.g. inductance, output_caps capacitance and esr"
                          + (")" if is_digital(design) else ", or parts with an E-series tolerance)"))
    lo, hi = session.f_hz[0], session.f_hz[-1]
    f_hz = np.geomspace(lo, hi, max(16, int(np.ceil(points_per_decade * np.log10(hi / lo))) + 1))
    controller, note = None, ""
    if is_digital(fixed):
        f_hz[-1] = hi  # exactly fs/2: the sampled loop's margins need the grid to end there
        controller, note = fixed_controller(result)
    factors = temperature_factors(qs, fixed.tolerances)
    names = tuple(c.name for c in fixed.tolerances.temperatures)
    values = np.array([[q.nominal for q in qs]])
    nominal = _fold(row_margins(fixed, qs, (values[:, None, :] * factors[None]).reshape(factors.shape[0], len(qs)),
                                f_hz, controller=controller), 1)
    return Study(fixed, qs, f_hz, Targets.from_design(fixed), nominal, factors, names, controller, note)


#: Tolerance entries that name a part of an analog network (a digital design has none).
_NETWORK_ENTRIES = ("gbw", "ctr", "c_opto")


def _check_digital_tolerances(tol: Tolerances) -> None:
    """A digital design's tolerances vary the plant only: its controller is fixed, it has no network parts."""
    for name in sorted(tol.parts):
        raise DesignError(f"tolerances.parts.{name}", name, "a digital design has no network parts (its controller"
                          " C(z) is fixed): vary the plant (inductance, dcr, r_switch, r_rectifier, output_caps)")
    for key in _NETWORK_ENTRIES:
        if key in tol.entries:
            raise DesignError(f"tolerances.{key}", key, "a digital design has no analog network: vary the plant"
                              " (inductance, dcr, r_switch, r_rectifier, output_caps)")


# ------------------------------------------------------------------ targets and worst corners
def meets_targets(m: RowMargins, targets: Targets) -> np.ndarray:
    """Whether each row meets every target, (draws, corners) of bool.

    The verdict's rules (:func:`loopkit.verdict.verdict_findings`): stable, one crossover, PM at
    least the target and a finite GM at least its target (0.05 slack each), and at CCM corners
    the crossover within ``fc / fc_band .. fc * fc_band``.
    """
    lo, hi = targets.fc_hz / targets.fc_band, targets.fc_hz * targets.fc_band
    with np.errstate(invalid="ignore"):
        ok = m.stable & (m.n_crossovers == 1) & (m.pm_deg >= targets.pm_deg - _SLACK)
        ok &= ~np.isfinite(m.gm_db) | (m.gm_db >= targets.gm_db - _SLACK)
        ok &= m.dcm | ((m.fc_hz >= lo) & (m.fc_hz <= hi))
    return ok


def worst_corner(m: RowMargins) -> dict:
    """Per draw: the lowest PM (deg; -180 where a corner is unstable or never crosses), the lowest
    finite GM (dB; inf where none) and the lowest and highest crossover (Hz)."""
    usable = m.stable & (m.n_crossovers >= 1) & np.isfinite(m.pm_deg)
    pm = np.min(np.where(usable, m.pm_deg, -180.0), axis=1)
    gm = np.min(np.where(np.isfinite(m.gm_db), m.gm_db, np.inf), axis=1)
    fc = np.where(m.n_crossovers >= 1, m.fc_hz, np.nan)
    none = np.all(np.isnan(fc), axis=1)
    filled = np.where(none[:, None], 0.0, fc)  # rows without a crossover give NaN, without a warning
    lo = np.where(none, np.nan, np.nanmin(np.where(np.isnan(filled), np.inf, filled), axis=1))
    hi = np.where(none, np.nan, np.nanmax(np.where(np.isnan(filled), -np.inf, filled), axis=1))
    return {"pm_deg": pm, "gm_db": gm, "fc_min_hz": lo, "fc_max_hz": hi}


# ------------------------------------------------------------------ intervals
def wilson_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion ``k / n``.

    Notes
    -----
    E. B. Wilson, "Probable inference, the law of succession, and statistical inference",
    JASA 22 (1927), 209-212: with ``z`` the normal quantile, the centre is
    ``(p + z^2/2n) / (1 + z^2/n)`` and the half-width ``z sqrt(p (1-p)/n + z^2/4n^2) / (1 + z^2/n)``.
    """
    from scipy.stats import norm

    if n <= 0:
        return 0.0, 1.0
    z = norm.ppf(0.5 + confidence / 2.0)
    p = k / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / den
    return float(max(0.0, centre - half)), float(min(1.0, centre + half))


def clopper_pearson_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Clopper-Pearson ("exact") interval, by :func:`scipy.stats.binomtest` (Clopper and Pearson,
    Biometrika 26, 1934)."""
    from scipy.stats import binomtest

    if n <= 0:
        return 0.0, 1.0
    ci = binomtest(int(k), int(n)).proportion_ci(confidence_level=confidence, method="exact")
    return float(ci.low), float(ci.high)


# ------------------------------------------------------------------ Monte Carlo
@dataclass(frozen=True)
class MonteCarloResult:
    """A Monte Carlo run: the draws it finished and their margins.

    Attributes
    ----------
    values : ndarray (draws, quantities)
        The finished draws' values (in draw order).
    margins : RowMargins
        Their margins, (draws, corners).
    meets : ndarray (draws, corners) of bool
    random_state : int
    requested : int
        Draws asked for; ``len(values)`` is less when the run was cancelled.
    confidence : float
    """

    quantities: list
    values: np.ndarray
    margins: RowMargins
    meets: np.ndarray
    random_state: int
    requested: int
    confidence: float = 0.95

    @property
    def n(self) -> int:
        return self.values.shape[0]

    @property
    def cancelled(self) -> bool:
        return self.n < self.requested

    @property
    def passed(self) -> np.ndarray:
        return np.all(self.meets, axis=1)

    @property
    def yield_fraction(self) -> float:
        return float(np.mean(self.passed)) if self.n else float("nan")

    @property
    def wilson(self) -> tuple[float, float]:
        return wilson_interval(int(np.sum(self.passed)), self.n, self.confidence)

    @property
    def clopper_pearson(self) -> tuple[float, float]:
        return clopper_pearson_interval(int(np.sum(self.passed)), self.n, self.confidence)

    @property
    def worst(self) -> dict:
        return worst_corner(self.margins)


def _chunks(n: int, step: int) -> list[tuple[int, int]]:
    return [(a, min(a + step, n)) for a in range(0, n, step)]


def monte_carlo(study: Study, n_draws: int, random_state: int = 0, workers: int = 1, progress=None,
                budget_bytes: int = MEMORY_BUDGET_BYTES, confidence: float = 0.95, client=None) -> MonteCarloResult:
    """Margins at every corner of ``n_draws`` random draws of the tolerances.

    Parameters
    ----------
    study : Study
    n_draws : int
    random_state : int
        The draws are ``draw_values(..., np.random.default_rng(random_state))``: the same number
        gives the same draws, whatever ``workers`` and chunking.
    workers : int
        Processes (1: this one).  Chunks are a pure function of (design, quantities, draws, grid).
    progress : callable, optional
        ``progress(done, total)`` after each chunk.
    budget_bytes : int
        Working memory of one chunk.
    client : dask.distributed.Client, optional
        Run the chunks on a Dask cluster instead (the optional extra ``loopkit[dask]``); the
        results are the same as in one process.

    Returns
    -------
    MonteCarloResult
        On ``KeyboardInterrupt`` (Ctrl-C) the draws finished so far (a prefix, in order).
    """
    if not isinstance(n_draws, (int, np.integer)) or n_draws < 1:
        raise DesignError("draws", n_draws, "must be a whole number >= 1")
    qs = study.quantities
    values = draw_values(qs, int(n_draws), np.random.default_rng(random_state))
    n_t = study.factors.shape[0]
    step = draws_per_chunk(study.n_corners * n_t, study.f_hz.size, budget_bytes, bytes_per_row_point(study.design))
    if client is not None:
        workers = max(workers, len(client.scheduler_info().get("workers", {})) or 1)
    if workers > 1:  # several chunks per worker keep the pool busy
        step = max(1, min(step, -(-n_draws // (4 * workers))))
    spans = _chunks(int(n_draws), step)
    done: list[RowMargins] = []
    try:
        if client is not None:
            futures = [client.submit(_chunk, study.design, qs, values[a:b], study.f_hz, study.factors,
                                     study.controller, pure=False) for a, b in spans]
            try:
                for (a, b), fut in zip(spans, futures):
                    done.append(fut.result())
                    if progress is not None:
                        progress(b, n_draws)
            except KeyboardInterrupt:
                client.cancel(futures)
                raise
        elif workers <= 1:
            for a, b in spans:
                done.append(_chunk(study.design, qs, values[a:b], study.f_hz, study.factors, study.controller))
                if progress is not None:
                    progress(b, n_draws)
        else:
            with ProcessPoolExecutor(max_workers=workers) as pool:
                futures = [pool.submit(_chunk, study.design, qs, values[a:b], study.f_hz, study.factors,
                                       study.controller) for a, b in spans]
                try:
                    for (a, b), fut in zip(spans, futures):
                        done.append(fut.result())
                        if progress is not None:
                            progress(b, n_draws)
                except KeyboardInterrupt:
                    for fut in futures:
                        fut.cancel()
                    raise
    except KeyboardInterrupt:
        pass
    n_done = sum(m.n_draws for m in done)
    empty = RowMargins(*(np.zeros((0, study.n_corners * n_t), dt) for dt in (float, float, float, int, bool, bool,
                                                                               bool)))
    margins = RowMargins.concatenate(done) if done else empty
    return MonteCarloResult(qs, values[:n_done], margins, meets_targets(margins, study.targets), int(random_state),
                            int(n_draws), confidence)


def loop_envelope(study: Study, values: np.ndarray, f_hz: np.ndarray | None = None,
                  budget_bytes: int = MEMORY_BUDGET_BYTES) -> dict:
    """The loop gain's envelope over draws and corners: lowest and highest |T| (dB) and phase (deg).

    Parameters
    ----------
    study : Study
    values : ndarray (draws, quantities)
        E.g. a Monte Carlo run's ``values`` (or some of them).
    f_hz : ndarray, optional
        Frequencies, Hz; default the study's grid.

    Returns
    -------
    dict
        ``f_hz``, ``mag_db_min``, ``mag_db_max``, ``phase_deg_min``, ``phase_deg_max`` (each (nf,)),
        over every corner of every draw, chunk by chunk (memory stays bounded).  The phase is the
        loop's continuous phase (:meth:`loopkit.result.OpenLoop.with_network`).
    """
    f = study.f_hz if f_hz is None else np.asarray(f_hz, float)
    values = study.expand(values)
    step = draws_per_chunk(study.n_corners, f.size, budget_bytes, bytes_per_row_point(study.design))
    lo_m = np.full(f.size, np.inf)
    hi_m = np.full(f.size, -np.inf)
    lo_p, hi_p = lo_m.copy(), hi_m.copy()
    for a, b in _chunks(values.shape[0], step):
        _, resp, phase, _ = row_loop(study.design, study.quantities, values[a:b], f, study.controller)
        mag = 20.0 * np.log10(np.abs(resp))
        lo_m, hi_m = np.minimum(lo_m, mag.min(axis=0)), np.maximum(hi_m, mag.max(axis=0))
        lo_p, hi_p = np.minimum(lo_p, phase.min(axis=0)), np.maximum(hi_p, phase.max(axis=0))
    return {"f_hz": f, "mag_db_min": lo_m, "mag_db_max": hi_m, "phase_deg_min": lo_p, "phase_deg_max": hi_p}


# ------------------------------------------------------------------ sensitivity
@dataclass(frozen=True)
class Sensitivity:
    """One quantity's effect on the worst-corner PM.

    ``pm_low_deg`` and ``pm_high_deg``: worst-corner PM with the quantity at its lower and upper
    limit (others nominal); ``effect_deg``: the larger drop below nominal (0 if neither lowers
    it); ``rank_correlation``: Spearman's rho of the Monte Carlo draws with the worst-corner PM
    (NaN without a run).
    """

    key: str
    pm_low_deg: float
    pm_high_deg: float
    effect_deg: float
    rank_correlation: float


def sensitivity(study: Study, mc: MonteCarloResult | None = None) -> list[Sensitivity]:
    """Which tolerance moves the worst-corner PM most, largest effect first.

    Notes
    -----
    Method: one at a time at the tolerance limits (each quantity at its lower, then its upper
    limit, the others nominal; 2 q draws in one batch), ranked by the larger drop of the
    worst-corner PM below its nominal value.  With a Monte Carlo run, Spearman's rank
    correlation (:func:`scipy.stats.spearmanr`) of each quantity's draws with the worst-corner
    PM is given beside it (it sees interactions the one-at-a-time method misses).
    """
    qs = study.quantities
    nominal = study.nominal_values
    rows = []
    for j, q in enumerate(qs):
        for limit in (q.low, q.high):
            v = nominal.copy()
            v[j] = limit
            rows.append(v)
    if not rows:
        return []
    pm = worst_corner(study_margins(study, np.array(rows)))["pm_deg"].reshape(-1, 2)
    pm0 = float(worst_corner(study.nominal)["pm_deg"][0])
    rho = np.full(len(qs), np.nan)
    if mc is not None and mc.n > 2:
        from scipy.stats import spearmanr

        wpm = mc.worst["pm_deg"]
        for j in range(len(qs)):
            if np.ptp(mc.values[:, j]) > 0 and np.ptp(wpm) > 0:
                rho[j] = float(spearmanr(mc.values[:, j], wpm).statistic)
    out = [Sensitivity(q.key, float(pm[j, 0]), float(pm[j, 1]), float(max(0.0, pm0 - min(pm[j]))), float(rho[j]))
           for j, q in enumerate(qs)]
    return sorted(out, key=lambda s: (-s.effect_deg, s.key))


# ------------------------------------------------------------------ worst case
@dataclass(frozen=True)
class WorstCase:
    """The extreme-value worst case: the values giving the lowest worst-corner PM found.

    ``vertices`` is the number of box vertices visited, ``evaluations`` the draws evaluated in
    all; ``margins`` the worst draw's margins (one draw).
    """

    values: np.ndarray
    pm_deg: float
    margins: RowMargins
    vertices: int
    evaluations: int


def worst_case(study: Study, rounds: int = 3, points: int = 9) -> WorstCase:
    """Lowest worst-corner PM over the tolerance box: vertices, then a coordinate search.

    Parameters
    ----------
    study : Study
    rounds : int
        Passes of the coordinate search.
    points : int
        Values tried along each quantity's range per pass (ends included).

    Notes
    -----
    Vertices: every corner of the box up to :data:`MAX_VERTEX_QUANTITIES` quantities; beyond
    that, the vertex where each quantity sits at the limit that lowered the PM in the
    one-at-a-time sensitivity, and that vertex's one-flip neighbours.  The coordinate search
    then moves one quantity at a time over ``points`` values of its range (the others held)
    and keeps the lowest, until a pass changes nothing.  The box's interior can hide a lower
    point than any vertex (e.g. a resonance); the search finds it only where it lies along a
    coordinate direction from the best point so far.
    """
    qs = study.quantities
    lows = np.array([q.low for q in qs])
    highs = np.array([q.high for q in qs])
    if not qs:
        return WorstCase(np.zeros(0), float(worst_corner(study.nominal)["pm_deg"][0]), study.nominal, 0, 0)
    if len(qs) <= MAX_VERTEX_QUANTITIES:
        verts = np.array(list(itertools.product(*[(lo, hi) for lo, hi in zip(lows, highs)])))
    else:
        sens = {s.key: s for s in sensitivity(study)}
        base = np.array([q.low if sens[q.key].pm_low_deg <= sens[q.key].pm_high_deg else q.high for q in qs])
        flips = [base]
        for j in range(len(qs)):
            v = base.copy()
            v[j] = highs[j] if base[j] == lows[j] else lows[j]
            flips.append(v)
        verts = np.array(flips)
    pm = worst_corner(study_margins(study, verts))["pm_deg"]
    evaluations = len(verts)
    best = verts[int(np.argmin(pm))].copy()
    best_pm = float(np.min(pm))
    for _ in range(rounds):
        improved = False
        for j in range(len(qs)):
            if highs[j] == lows[j]:
                continue
            trial = np.repeat(best[None, :], points, axis=0)
            trial[:, j] = np.linspace(lows[j], highs[j], points)
            pm = worst_corner(study_margins(study, trial))["pm_deg"]
            evaluations += points
            k = int(np.argmin(pm))
            if pm[k] < best_pm - 1e-9:
                best, best_pm, improved = trial[k].copy(), float(pm[k]), True
        if not improved:
            break
    margins = study_margins(study, best[None, :])
    return WorstCase(best, best_pm, margins, len(verts), evaluations)
