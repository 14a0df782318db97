"""The loop at every corner: T(s) = -Tu(s) Gc(s), from the design to a :class:`LoopResult`.

:class:`LoopSession` holds what does not change while the targets move (the
power stage at every corner, the uncompensated loop on the frequency grid);
:meth:`LoopSession.run` synthesises the network for a set of targets, snaps the
parts to the E-series, and gives the margins at every corner before and after
snapping.  CLI, app and tests all go through it.

The control scheme (:mod:`loopkit.schemes`) gives the uncompensated loop ``Tu``
(voltage mode: ``H Fm Gvd``); the loop gain is ``T = -Tu Gc`` with the inverting
network ``Gc`` (sign convention: :mod:`loopkit.result`).  Findings are worded in
:mod:`loopkit.findings`, the verdict in :mod:`loopkit.verdict`, the worst-corner
placement search in :mod:`loopkit.worst_corner`.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from . import eseries
from .cautions import CAUTION
from .design import Design
from .errors import Finding, InfeasibleDesign
from .findings import loop_findings, opamp_findings, target_findings, unique, why_not_single_crossover, worst_corner
from .margins import loop_margins
from .networks import NetworkContext, network_module
from .powerstage import StageResult, analyse_stage
from .rational import Rational
from .result import LoopResult, OpenLoop, Targets, apply_parts, closed_loop, targets_with, with_targets
from .schemes import scheme_module
from .schemes.voltage_mode import modulator_transfer
from .synthesis import Placement, place
from .units import format_value
from .verdict import verdict_findings
from .worst_corner import search_placement

__all__ = [
    "CAUTION",
    "LoopResult",
    "LoopSession",
    "OpenLoop",
    "Targets",
    "apply_parts",
    "closed_loop",
    "design_loop",
    "frequency_grid",
    "modulator_transfer",
    "network_context",
    "targets_with",
]

#: Fixed-point steps correcting gain (and boost) for a finite amplifier at the design corner.
SOLVE_STEPS = 40


def frequency_grid(stage: StageResult, fsw: float, points: int = 1000) -> np.ndarray:
    """Log-spaced analysis grid, Hz: from below the lowest plant pole to the switching frequency."""
    lows = [10.0]
    for arr in (stage.f0_hz, stage.fp_hz):
        finite = arr[np.isfinite(arr)]
        if finite.size:
            lows.append(0.05 * finite.min())
    return np.geomspace(max(min(lows), 0.1), fsw, points)


def network_context(design: Design) -> NetworkContext:
    """What the network needs from the design besides its parts."""
    sensing = design.sensing
    v_sensed = abs(design.operating.vout) if sensing.kind == "divider" else sensing.reference
    return NetworkContext(opamp=design.compensator.opamp, vref=sensing.reference, v_sensed=v_sensed,
                          opto=dict(design.compensator.opto))


def _default_r1(design: Design, ctx: NetworkContext) -> float:
    s = design.sensing
    if s.r_top > 0:
        return s.r_top
    if ctx.v_sensed > ctx.vref:
        return (ctx.v_sensed - ctx.vref) / s.divider_current
    return 10e3  # differential sensing: no divider current to set it (common practice, no source)


class LoopSession:
    """The stage and uncompensated loop of a design, cached for fast re-synthesis.

    Parameters
    ----------
    design : Design
    f_hz : ndarray, optional
        Analysis grid; default :func:`frequency_grid` (1000 points).
    """

    def __init__(self, design: Design, f_hz: np.ndarray | None = None):
        self.design = design
        self.stage = analyse_stage(design)
        self.f_hz = frequency_grid(self.stage, design.stage.fsw) if f_hz is None else np.asarray(f_hz, float)
        self.ctx = network_context(design)
        self.scheme = scheme_module(design.control.scheme).uncompensated(design, self.stage)
        self.uncompensated = self.scheme.tu
        self.open_loop = OpenLoop(self.uncompensated, self.uncompensated.response(self.f_hz),
                                  self.uncompensated.phase_deg(self.f_hz), self.scheme.gvg, self.scheme.zout,
                                  dict(self.scheme.figures))
        self.plant_resp = self.stage.gvd.response(self.f_hz)
        self.r1 = _default_r1(design, self.ctx)
        self._searched: dict = {}  # targets (fc left out) -> last searched placement, relative to fc
        self._rhp_min = np.nanmin(self.stage.f_rhp_hz) if np.any(np.isfinite(self.stage.f_rhp_hz)) else np.nan
        if self.scheme.sampled is not None:  # digital control: the loop in z, analysed up to fs/2
            from .digital_loop import prepare

            prepare(self, f_hz)

    # ------------------------------------------------------------------ public
    def run(self, targets: Targets | None = None, preview: bool = False) -> LoopResult:
        """Synthesise (or analyse the design's given parts) and analyse every corner.

        With ``targets`` None and parts in the design, those parts are analysed
        as given; otherwise the network is synthesised for the targets (the
        design's own by default).

        ``preview`` True (a slider being dragged): where method ``auto`` needed
        the worst-corner search for these targets before, the placement found
        then (scaled to the new crossover) is tried first and kept when it
        meets every target; otherwise the K factor's parts are shown as they
        are (the verdict still names every missed corner).  Without
        ``preview`` the result depends only on the design and the targets (the
        CLI's answer), so a drag ends with a run without it.
        """
        comp = self.design.compensator
        if self.scheme.sampled is not None:  # digital control: the controller is designed in z
            from .digital_loop import run as run_digital

            return run_digital(self, targets or Targets.from_design(self.design), preview)
        if targets is None and comp.parts:
            return self._analyse_given(Targets.from_design(self.design))
        targets = targets or Targets.from_design(self.design)
        return self._synthesise(targets, preview)

    # ------------------------------------------------------------------ corners
    def design_corner(self, targets: Targets) -> int:
        """The corner to design at: the given one, or the worst one.

        The worst corner is the CCM corner whose uncompensated loop has the
        least phase at fc, i.e. needs the most boost (ties: the most gain).
        DCM corners are left out unless every corner is in DCM: at light load
        the plant's gain at fc is far lower, so a network designed there would
        push the crossover of every CCM corner far above the target.
        """
        if targets.design_corner is not None:
            return int(targets.design_corner)
        f = np.array([targets.fc_hz])
        mag = np.abs(self.uncompensated.response(f)[:, 0])
        phase = self.uncompensated.phase_deg(f)[:, 0]
        candidates = np.nonzero(~self.stage.dcm)[0] if np.any(~self.stage.dcm) else np.arange(mag.size)
        order = np.lexsort((-mag[candidates], np.round(phase[candidates], 9)))  # least phase, then most gain
        return int(candidates[order[0]])

    # ------------------------------------------------------------------ synthesis
    def _synthesise(self, targets: Targets, preview: bool = False) -> LoopResult:
        findings = list(self.stage.findings) + list(self.scheme.findings)
        findings.extend(target_findings(self.stage, self.design.stage.fsw, targets))
        if targets.fc_hz <= 0:
            return self._infeasible(targets, findings, "compensator.fc", targets.fc_hz, "give a crossover target > 0 Hz")
        fsw = self.design.stage.fsw
        if targets.fc_hz >= fsw / 2:
            return self._infeasible(targets, findings, "compensator.fc", format_value(targets.fc_hz, "Hz"),
                                    f"must be below half the switching frequency ({format_value(fsw / 2, 'Hz')}):"
                                    " the averaged model ends there")
        corner = self.design_corner(targets)
        module = network_module(targets.network)
        key = replace(targets, fc_hz=0.0, resistor_series="", capacitor_series="")
        if preview and targets.method == "auto" and key in self._searched:
            reused = self._reuse(module, targets, corner, self._searched[key])
            if reused is not None:
                return self._assemble(targets, *reused, corner, findings + list(reused[1].notes))
        try:
            parts, placement = self._solve(module, targets, corner)
        except InfeasibleDesign as exc:
            parts, placement, failure = None, None, exc
        if preview and parts is not None and key not in self._searched:
            # a drag over a design the K factor served last time: no exact-parts check on every move
            # (the drag ends with a full run, which checks and searches where needed)
            findings.extend(placement.notes)
            return self._assemble(targets, parts, placement, corner, findings)
        before = None if parts is None else self._shortfall(module, parts, targets)
        if targets.method == "auto" and module.ZEROS > 0 and (before is None or before[0] > 0):
            searched = self._search(module, targets, corner, placement)
            if searched is not None and (before is None or self._shortfall(module, searched[0], targets) < before):
                parts, placement = searched
                self._searched[key] = (tuple(z / targets.fc_hz for z in placement.zeros_hz),
                                       tuple(p / targets.fc_hz for p in placement.poles_hz))
        if parts is None:
            return self._infeasible(targets, findings, failure.field, failure.value, failure.allowed, failure.reasons)
        findings.extend(placement.notes)
        return self._assemble(targets, parts, placement, corner, findings)

    def _reuse(self, module, targets: Targets, corner: int, shape: tuple) -> tuple[dict, Placement] | None:
        """The last searched placement scaled to this crossover, when it meets every target."""
        zeros, poles = (tuple(x * targets.fc_hz for x in part) for part in shape)
        keys = ("fz1", "fz2", "fp1", "fp2") if module.ZEROS == 2 else ("fz", "fp")
        try:
            parts, placement = self._solve(module, replace(targets, method="placement"), corner,
                                           dict(zip(keys, zeros + poles)))
        except InfeasibleDesign:
            return None
        if self._shortfall(module, parts, targets)[0] > 0:
            return None
        note = Finding("placement-searched", "preview: the placement last searched for the worst corner, scaled to"
                       " this crossover (the search runs again when the move ends)", None, "note")
        return parts, replace(placement, notes=placement.notes + (note,))

    def _shortfall(self, module, parts: dict, targets: Targets) -> tuple[int, float]:
        """(number of corners missing a target, -worst PM excess) of a network: lower is better."""
        gc = module.transfer(parts, self.ctx)
        loop, _, resp, phase = self._loop_on_grid(gc)
        m = loop_margins(loop, self.f_hz, resp, phase, self.design.stage.fsw / 2)
        misses = verdict_findings(m, self.stage, targets, self.design.stage.fsw)
        worst = np.min(np.where(m.stable & np.isfinite(m.pm_deg), m.pm_deg, -180.0)) - targets.pm_deg
        return len({f.corner for f in misses}), -float(worst)

    def _search(self, module, targets: Targets, corner: int, kfactor: Placement | None):
        """Parts from the worst-corner placement search (:mod:`loopkit.worst_corner`), or None."""
        fc, fsw = targets.fc_hz, self.design.stage.fsw
        integrator = Rational.from_factors(-1.0, (), [(0.0, 1.0)]).broadcast(self.stage.n_corners)
        _, _, t0, t0_phase = self._loop_on_grid(integrator)
        defaults = self._placement_defaults(corner)
        n_z, n_p = module.ZEROS, module.POLES
        starts = [((defaults["f_zero"],) * n_z, (defaults["f_pole1"], defaults["f_pole2"])[:n_p])]
        if kfactor is not None:
            starts.append((kfactor.zeros_hz, kfactor.poles_hz))
        low = np.nanmin(np.r_[self.stage.f0_hz, self.stage.fp_hz, fc])
        found = search_placement(
            t0, t0_phase, self.f_hz, n_zeros=n_z, n_poles=n_p, fc_hz=fc, pm_deg=targets.pm_deg,
            gm_db=targets.gm_db, fc_band=targets.fc_band, design_corner=corner, ccm=~self.stage.dcm,
            model_limit_hz=fsw / 2, zero_bounds_hz=(max(low / 10.0, self.f_hz[0]), fc),
            pole_bounds_hz=(1.5 * fc, fsw / 2), starts=starts)
        keys = ("fz1", "fz2", "fp1", "fp2") if n_z == 2 else ("fz", "fp")
        best = None
        for candidate in found:  # checked on the exact loop: the search scores a coarse grid
            explicit = dict(zip(keys, candidate.zeros_hz + candidate.poles_hz))
            try:
                parts, _ = self._solve(module, replace(targets, method="placement"), corner, explicit, steps=6)
            except InfeasibleDesign:
                continue
            score = self._shortfall(module, parts, targets)
            if best is None or score < best[0]:
                best = (score, explicit, candidate)
        if best is None:
            return None
        _, explicit, candidate = best
        parts, placement = self._solve(module, replace(targets, method="placement"), corner, explicit)
        note = Finding("placement-searched",
                       "the K-factor placement left corners below the targets: zeros and poles were placed for the"
                       f" worst corner instead (zeros {', '.join(format_value(z, 'Hz') for z in candidate.zeros_hz)};"
                       f" poles {', '.join(format_value(p, 'Hz') for p in candidate.poles_hz)})", None, "note")
        return parts, replace(placement, notes=placement.notes + (note,))

    def _solve(self, module, targets: Targets, corner: int, explicit: dict | None = None,
               steps: int = SOLVE_STEPS) -> tuple[dict, Placement]:
        """Parts meeting fc and PM at the design corner, on the network's real transfer.

        The placement is exact for the ideal network; with a finite op-amp the
        gain and boost are corrected by a few fixed-point steps until the loop
        at the design corner meets the targets (|T(fc)| within 1e-7, PM within
        1e-4 deg); if it does not settle, a finding says how far it is off.
        ``explicit`` gives the zeros and poles (placement keys) instead of the
        design's own ``[compensator.placement]``.
        """
        f = np.array([targets.fc_hz])
        tu = self.uncompensated.take(corner)
        tu_fc = complex(tu.response(f)[0, 0])
        tu_ph = float(tu.phase_deg(f)[0, 0])
        defaults = self._placement_defaults(corner)
        pm_goal, gain_scale = targets.pm_deg, 1.0
        fixed = {"R1": self.r1} if "R1" in module.DESIGNATORS else {}
        given = self.design.compensator.placement if explicit is None else explicit
        for _ in range(steps):
            placement = place(targets.network, targets.method, targets.fc_hz, pm_goal, tu_fc * gain_scale, tu_ph,
                              corner, targets.boost_split, given, defaults)
            parts = module.synthesise(targets.fc_hz, placement.gain_at_fc, placement.zeros_hz, placement.poles_hz,
                                      self.ctx, fixed)
            gc = module.transfer(parts, self.ctx)
            mag = abs(tu_fc * complex(gc.response(f)[0, 0]))
            pm_now = (tu_ph + float(gc.phase_deg(f)[0, 0]) + 360.0 + 180.0) % 360.0 - 180.0
            pm_free = (targets.method != "placement" and targets.network != "type1"
                       and abs(placement.boost_deg - placement.required_boost_deg) < 1e-6)
            if abs(mag - 1.0) < 1e-7 and (not pm_free or abs(pm_now - targets.pm_deg) < 1e-4):
                break
            gain_scale *= mag
            if pm_free:
                pm_goal += targets.pm_deg - pm_now
        else:
            note = Finding("targets-approximate",
                           f"with this amplifier the design corner reaches |T(fc)| = {20 * np.log10(mag):+.2f} dB and"
                           f" PM {pm_now:.2f} deg instead of 0 dB and {targets.pm_deg:g} deg", corner)
            placement = replace(placement, notes=placement.notes + (note,))
        return parts, placement

    def _placement_defaults(self, corner: int) -> dict:
        st = self.stage
        f_zero = st.f0_hz[corner] if np.isfinite(st.f0_hz[corner]) else st.fp_hz[corner]
        candidates = [x for x in list(st.f_esr_hz[corner]) + [self._rhp_min] if np.isfinite(x)]
        fsw_half = self.design.stage.fsw / 2
        return {"f_zero": float(f_zero), "f_pole1": float(min(candidates + [fsw_half])), "f_pole2": float(fsw_half)}

    # ------------------------------------------------------------------ analysis
    def _analyse_given(self, targets: Targets) -> LoopResult:
        module = network_module(targets.network)
        parts = dict(self.design.compensator.parts)
        missing = [d for d in module.DESIGNATORS if d not in parts]
        allowed = set(module.DESIGNATORS) | set(getattr(module, "OPTIONAL_DESIGNATORS", ()))
        unknown = sorted(set(parts) - allowed)
        if unknown:
            return self._infeasible(targets, list(self.stage.findings), "compensator.parts", ", ".join(unknown),
                                    f"not a part of the {targets.network} network (its parts: {', '.join(sorted(allowed))})")
        findings = list(self.stage.findings) + list(self.scheme.findings)
        if missing:
            return self._infeasible(targets, findings, "compensator.parts", ", ".join(missing),
                                    f"the {targets.network} network needs {', '.join(module.DESIGNATORS)}")
        corner = targets.design_corner if targets.design_corner is not None else self.design_corner(targets)
        return self._assemble(targets, parts, None, int(corner), findings, snap=False)

    def _loop_on_grid(self, gc: Rational, corner: int | None = None):
        """(T, Gc on the grid, T on the grid, continuous phase of T) for every corner or one."""
        return self.open_loop.with_network(gc, self.f_hz, corner)

    def _assemble(self, targets: Targets, parts_exact: dict, placement: Placement | None, corner: int,
                  findings: list, snap: bool = True) -> LoopResult:
        module = network_module(targets.network)
        parts = (eseries.snap_parts(parts_exact, targets.resistor_series, targets.capacitor_series)
                 if snap else dict(parts_exact))
        gc_exact = module.transfer(parts_exact, self.ctx)
        gc = module.transfer(parts, self.ctx) if snap else gc_exact
        loop_x = -(self.uncompensated * gc_exact)
        if placement is not None:  # the synthesised loop must cross once, stably, at the design corner
            _, _, resp_c, phase_c = self._loop_on_grid(gc_exact, corner)
            at_corner = loop_margins(loop_x.take(corner), self.f_hz, resp_c, phase_c, self.design.stage.fsw / 2)
            if at_corner.n_crossovers[0] != 1 or not at_corner.stable[0]:
                return self._infeasible(targets, findings, "compensator.fc", format_value(targets.fc_hz, "Hz"),
                                        why_not_single_crossover(self.stage, corner, at_corner, 0,
                                                                  targets.network, targets.fc_hz))
        loop, comp_resp, resp, phase = self._loop_on_grid(gc)
        margins = loop_margins(loop, self.f_hz, resp, phase, self.design.stage.fsw / 2)
        zeros, poles = module.poles_zeros(parts, self.ctx)
        worst = worst_corner(margins)
        findings.extend(eseries.part_warnings(parts))
        findings.extend(loop_findings(margins, self.stage, self.design.stage.fsw, targets))
        findings.extend(opamp_findings(module, parts, self.ctx, self.f_hz, margins, self.stage))
        if hasattr(module, "bias_findings"):  # the network's dc operating point (optocoupler)
            findings.extend(module.bias_findings(parts, self.ctx))
        return LoopResult(
            design=with_targets(self.design, targets), stage=self.stage, targets=targets, f_hz=self.f_hz,
            feasible=True,
            network=targets.network, parts_exact=dict(parts_exact), parts=parts, zeros_hz=tuple(zeros),
            poles_hz=tuple(poles), placement=placement, compensator=gc, compensator_exact=gc_exact, loop=loop,
            loop_exact=loop_x, plant_resp=self.plant_resp, comp_resp=comp_resp, loop_resp=resp,
            loop_phase_deg=phase, margins=margins, worst_corner=worst, design_corner=corner,
            findings=tuple(unique(findings)), open_loop=self.open_loop,
        )

    def _infeasible(self, targets, findings, field_name, value, allowed, reasons=()) -> LoopResult:
        message = f"no parts: {field_name} = {value}: {allowed}"
        if reasons:
            message += " (" + "; ".join(reasons) + ")"
        findings = list(findings) + [Finding("infeasible", message, None)]
        return LoopResult(
            design=with_targets(self.design, targets), stage=self.stage, targets=targets, f_hz=self.f_hz,
            feasible=False,
            network=targets.network, parts_exact={}, parts={}, zeros_hz=(), poles_hz=(), placement=None,
            compensator=None, compensator_exact=None, loop=None, loop_exact=None, plant_resp=self.plant_resp,
            comp_resp=None, loop_resp=None, loop_phase_deg=None, margins=None, worst_corner=-1, design_corner=-1,
            findings=tuple(unique(findings)), open_loop=self.open_loop,
        )

def design_loop(design: Design, targets: Targets | None = None, f_hz=None) -> LoopResult:
    """Synthesise and analyse in one call: ``LoopSession(design, f_hz).run(targets)``."""
    return LoopSession(design, f_hz).run(targets)


