"""Robust synthesis: the compensator for the worst case over corners and the tolerance box.

The nominal design's network meets the targets at nominal part values; here the network's
zeros and poles are searched so that the worst phase margin over every corner of every plant
scenario is highest, subject to the gain-margin target and the crossover band:

    maximise   min over scenarios s, corners k of  PM(s, k)
    subject to GM(s, k) >= target, CCM crossovers within fc / fc_band .. fc * fc_band,
               one crossover each

Scenarios: the nominal values and the vertices of the plant's tolerance box (the study's
quantities that are not network parts; every vertex up to :data:`MAX_VERTEX_PLANT` quantities,
else each quantity alone at each limit).  The search is :func:`loopkit.worst_corner.search_placement`
(vectorised candidate scoring on the ideal network, then Nelder-Mead) over rows = scenario x
corner; each placement it returns is built into real parts by the ordinary path
(``method = "placement"``, snapped to the E-series) and checked on the exact loop of every row.
The nominal design's own parts are a candidate too, and a candidate is taken only with no more
rows missing the gain-margin, band and crossover conditions than the nominal parts, so the
result is never worse than the nominal design on the scenarios.  The objective is common
practice (no source): a min-max design, solved numerically.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np

from .errors import DesignError
from .loop import LoopSession
from .montecarlo import Study, study_margins, worst_corner
from .networks import network_module
from .rational import Rational
from .rows import draw_design, row_open_loop
from .worst_corner import search_placement

__all__ = ["FC_LIFTS", "MAX_VERTEX_PLANT", "N_CANDIDATES", "RobustResult", "check_robust_applies", "robust_synthesis",
           "scenario_values"]

#: Up to this many plant quantities every vertex of their box is a scenario.
MAX_VERTEX_PLANT = 8

#: Best placements of the search built into parts and checked on every scenario.
N_CANDIDATES = 4
#: Crossover of the design corner as a multiple of the target, for each placement checked.
FC_LIFTS = (1.0, 1.2)

_NETWORK_KEYS = ("gbw", "ctr", "c_opto")
_SLACK = 0.05


@dataclass(frozen=True)
class RobustResult:
    """The robust network beside the nominal one.

    Attributes
    ----------
    parts, nominal_parts : dict
        Snapped parts of the robust and the nominal network.
    zeros_hz, poles_hz : tuple
        The robust placement (the nominal parts kept: empty).
    scenarios : ndarray (scenarios, quantities)
        The plant values the search covered (row 0 nominal), over all the study's quantities.
    worst_pm_deg, nominal_worst_pm_deg : float
        Lowest PM over every scenario and corner, robust and nominal parts.
    pm_at_nominal_deg, nominal_pm_at_nominal_deg : float
        Worst-corner PM at nominal values.
    misses, nominal_misses : int
        Scenario rows missing the gain margin, the band or the single crossover.
    kept_nominal : bool
        No candidate did better than the nominal parts.
    """

    parts: dict
    nominal_parts: dict
    zeros_hz: tuple
    poles_hz: tuple
    scenarios: np.ndarray
    worst_pm_deg: float
    nominal_worst_pm_deg: float
    pm_at_nominal_deg: float
    nominal_pm_at_nominal_deg: float
    misses: int
    nominal_misses: int
    kept_nominal: bool


def scenario_values(study: Study) -> np.ndarray:
    """Nominal values first, then the plant's vertices (or each plant quantity alone at each limit)."""
    qs = study.quantities
    nominal = study.nominal_values
    plant = [j for j, q in enumerate(qs) if not q.key.startswith("parts.") and q.key not in _NETWORK_KEYS
             and q.high > q.low]
    rows = [nominal]
    if len(plant) <= MAX_VERTEX_PLANT:
        for corner in itertools.product(*[(qs[j].low, qs[j].high) for j in plant]):
            v = nominal.copy()
            v[plant] = corner
            rows.append(v)
    else:
        for j in plant:
            for limit in (qs[j].low, qs[j].high):
                v = nominal.copy()
                v[j] = limit
                rows.append(v)
    return np.array(rows)


def _score(study: Study, parts: dict, scenarios: np.ndarray) -> tuple[int, float, float]:
    """(rows missing GM, band or single crossover; lowest PM over all rows; worst-corner PM at nominal)."""
    design = replace(study.design, compensator=replace(study.design.compensator, parts=dict(parts)))
    qs = [replace(q, low=q.nominal, high=q.nominal) if q.key.startswith("parts.") else q for q in study.quantities]
    values = scenarios.copy()
    for j, q in enumerate(study.quantities):
        if q.key.startswith("parts."):
            values[:, j] = parts[q.key[6:]]
    m = study_margins(replace(study, design=design, quantities=qs), values)
    t = study.targets
    lo, hi = t.fc_hz / t.fc_band, t.fc_hz * t.fc_band
    with np.errstate(invalid="ignore"):
        bad = ~m.stable | (m.n_crossovers != 1) | (np.isfinite(m.gm_db) & (m.gm_db < t.gm_db - _SLACK))
        bad |= ~m.dcm & ~((m.fc_hz >= lo) & (m.fc_hz <= hi))
    pm = worst_corner(m)["pm_deg"]
    return int(np.sum(bad)), float(np.min(pm)), float(pm[0])


def check_robust_applies(design) -> None:
    """Robust synthesis searches an analog network's zeros and poles: a digital controller is refused."""
    if design.control.scheme == "digital":
        raise DesignError("--robust", "control.scheme = \"digital\"", "robust synthesis searches an analog"
                          " network's parts; a digital design's controller is designed in z (not searched over the"
                          " tolerance box): leave out --robust, or use an analog control scheme")


def robust_synthesis(study: Study) -> RobustResult:
    """The network that maximises the worst-case PM over corners and the plant's tolerance box.

    Parameters
    ----------
    study : Study
        From :func:`loopkit.montecarlo.prepare_study` (its design's targets and parts are the nominal ones).

    Returns
    -------
    RobustResult

    Raises
    ------
    DesignError
        A digital design (:func:`check_robust_applies`).
    """
    design = study.design
    check_robust_applies(design)
    module = network_module(design.compensator.network)
    nominal_parts = dict(design.compensator.parts)
    scenarios = scenario_values(study)
    base = _score(study, nominal_parts, scenarios)
    best = (base, nominal_parts, (), ())
    if module.ZEROS > 0:
        # synthesised on the plant at nominal study values (a bank's derating included), as scenario 0
        at_nominal = draw_design(design, study.quantities, study.nominal_values)
        free = replace(at_nominal.compensator, parts={})
        session = LoopSession(replace(at_nominal, compensator=free))
        # the design's own dense grid: the search interpolates the loop, and a sharp double pole needs it
        open_loop, dcm = row_open_loop(design, study.quantities, study.expand(scenarios), session.f_hz)
        n = open_loop.tu.n_corners
        integrator = Rational.from_factors(-1.0, (), [(0.0, 1.0)]).broadcast(n)
        _, _, t0, t0_phase = open_loop.with_network(integrator, session.f_hz)
        t = study.targets
        corner = session.design_corner(t)
        st = session.stage
        low = np.nanmin(np.r_[st.f0_hz, st.fp_hz, t.fc_hz])
        fsw = design.stage.fsw
        nominal_pz = module.poles_zeros(nominal_parts, session.ctx)
        starts = [(tuple(nominal_pz[0]), tuple(p for p in nominal_pz[1] if p > 0))]
        found = search_placement(
            t0, t0_phase, session.f_hz, n_zeros=module.ZEROS, n_poles=module.POLES, fc_hz=t.fc_hz, pm_deg=t.pm_deg,
            gm_db=t.gm_db, fc_band=t.fc_band, design_corner=corner, ccm=~dcm, model_limit_hz=fsw / 2,
            zero_bounds_hz=(max(low / 10.0, session.f_hz[0]), t.fc_hz), pole_bounds_hz=(1.5 * t.fc_hz, fsw / 2),
            starts=starts)
        keys = ("fz1", "fz2", "fp1", "fp2") if module.ZEROS == 2 else ("fz", "fp")
        for cand, lift in itertools.product(found[:N_CANDIDATES], FC_LIFTS):
            # the design corner crosses at fc (or a little above: the scenarios' crossovers spread
            # downwards too, and the band is about fc)
            comp = replace(free, method="placement", placement=dict(zip(keys, cand.zeros_hz + cand.poles_hz)),
                           design_corner=corner, fc_hz=t.fc_hz * lift)
            result = LoopSession(replace(at_nominal, compensator=comp)).run()
            if not result.feasible:
                continue
            score = _score(study, result.parts, scenarios)
            if score[0] <= base[0] and score[1] > best[0][1]:
                best = (score, dict(result.parts), cand.zeros_hz, cand.poles_hz)
    (misses, worst, at_nominal), parts, zeros, poles = best
    if not parts:
        raise DesignError("compensator", design.compensator.network, "no parts for the robust design")
    return RobustResult(parts, nominal_parts, zeros, poles, scenarios, worst, base[1], at_nominal, base[2], misses,
                        base[0], parts is nominal_parts)
