"""The loop at every corner: T(s) = sensing x compensator x modulator x Gvd.

:class:`LoopSession` holds what does not change while the targets move (the
power stage at every corner, the uncompensated loop on the frequency grid);
:meth:`LoopSession.run` synthesises the network for a set of targets, snaps the
parts to the E-series, and gives the margins at every corner before and after
snapping.  CLI, app and tests all go through it.

Sign convention: the uncompensated loop is ``Tu = H Fm Gvd`` (sensing,
modulator, plant) and the loop gain ``T = -Tu Gc``, where the error-amplifier
network ``Gc`` is inverting (negative at low frequency).  A correctly wired
loop therefore has T(0) > 0 and is analysed in the form 1 + T.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field, replace

import numpy as np

from . import eseries
from .cautions import CAUTION
from .design import Design
from .errors import Finding, InfeasibleDesign
from .margins import Margins, loop_margins
from .networks import NetworkContext, network_module
from .powerstage import StageResult, analyse_stage, corner_label
from .rational import Rational
from .schemes import scheme_module
from .schemes.voltage_mode import modulator_transfer
from .synthesis import Placement, place
from .units import format_value
from .verdict import model_findings, verdict_findings
from .worst_corner import search_placement

__all__ = [
    "CAUTION",
    "LoopResult",
    "LoopSession",
    "Targets",
    "apply_parts",
    "closed_loop",
    "design_loop",
    "frequency_grid",
    "modulator_transfer",
    "network_context",
]

#: Fixed-point steps correcting gain (and boost) for a finite amplifier at the design corner.
SOLVE_STEPS = 40
#: Kept for the app's colours until they follow the targets (common practice, no source).
PM_WARN_DEG = 45.0
GM_WARN_DB = 6.0


@dataclass(frozen=True)
class Targets:
    """What the designer asks of the loop (see :class:`loopkit.design.Compensator`)."""

    network: str
    fc_hz: float
    pm_deg: float
    boost_split: float = 0.5
    design_corner: int | None = None
    resistor_series: str = "E96"
    capacitor_series: str = "E12"
    method: str = "auto"
    gm_db: float = 6.0
    fc_band: float = 2.0

    @classmethod
    def from_design(cls, design: Design) -> Targets:
        c = design.compensator
        return cls(c.network, c.fc, c.pm, c.boost_split, c.design_corner, c.resistor_series,
                   c.capacitor_series, c.method, c.gm_db, c.fc_band)


@dataclass(frozen=True, eq=False)
class OpenLoop:
    """The uncompensated loop Tu per corner and on the analysis grid (response, continuous phase), and the
    line-to-output and output impedance of the plant with the scheme's inner loops closed."""

    tu: Rational
    resp: np.ndarray
    phase_deg: np.ndarray
    gvg: Rational
    zout: Rational

    def with_network(self, gc: Rational, f_hz: np.ndarray, corner: int | None = None):
        """(T, Gc on the grid, T on the grid, continuous phase of T) with the network ``gc``, every corner or one.

        T = -Tu Gc; its continuous phase is the sum of the parts' factor angles, corrected for the
        signs of the parts' gains and of the product's.
        """
        tu = self.tu if corner is None else self.tu.take(corner)
        tu_resp = self.resp if corner is None else self.resp[corner:corner + 1]
        tu_phase = self.phase_deg if corner is None else self.phase_deg[corner:corner + 1]
        loop = -(tu * gc)
        comp_resp = gc.response(f_hz)
        resp = -tu_resp * comp_resp
        phase = (tu_phase + gc.phase_deg(f_hz)
                 - np.where(tu.gain < 0, -180.0, 0.0)[:, None]
                 - np.where(gc.gain < 0, -180.0, 0.0)[:, None]
                 + np.where(loop.gain < 0, -180.0, 0.0)[:, None])
        return loop, comp_resp, resp, phase


@dataclass(frozen=True, eq=False)
class LoopResult:
    """Everything the designer sees about the loop; see /DEVELOPERS.md.

    ``feasible`` False means no parts were produced: ``findings`` say why and
    the part, transfer-function and margin fields are empty or None.
    """

    design: Design
    stage: StageResult
    targets: Targets
    f_hz: np.ndarray
    feasible: bool
    network: str
    parts_exact: dict
    parts: dict
    zeros_hz: tuple
    poles_hz: tuple
    placement: Placement | None
    compensator: Rational | None
    compensator_exact: Rational | None
    loop: Rational | None
    loop_exact: Rational | None
    plant_resp: np.ndarray
    comp_resp: np.ndarray | None
    loop_resp: np.ndarray | None
    loop_phase_deg: np.ndarray | None
    margins: Margins | None
    worst_corner: int
    design_corner: int
    findings: tuple = field(default_factory=tuple)
    open_loop: OpenLoop | None = field(default=None, repr=False)

    @property
    def met(self) -> bool:
        """True when parts exist and no finding is an error (every corner meets every target)."""
        return self.feasible and not any(f.severity == "error" for f in self.findings)

    @property
    def corner_labels(self) -> list[str]:
        return [corner_label(v, i) for v, i in zip(self.stage.vin, self.stage.load)]

    @functools.cached_property
    def _exact_on_grid(self):
        if self.loop_exact is None:
            return None
        if self.compensator_exact is self.compensator:
            return self.loop_resp, self.loop_phase_deg
        _, _, resp, phase = self.open_loop.with_network(self.compensator_exact, self.f_hz)
        return resp, phase

    @property
    def loop_resp_exact(self) -> np.ndarray | None:
        """T on ``f_hz`` with the computed (unrounded) parts; worked out on first use."""
        return None if self._exact_on_grid is None else self._exact_on_grid[0]

    @functools.cached_property
    def margins_exact(self) -> Margins | None:
        """Margins with the computed (unrounded) parts; worked out on first use."""
        if self.loop_exact is None:
            return None
        if self.compensator_exact is self.compensator:
            return self.margins
        resp, phase = self._exact_on_grid
        return loop_margins(self.loop_exact, self.f_hz, resp, phase, self.design.stage.fsw / 2)

    @functools.cached_property
    def loop_mag_db(self) -> np.ndarray | None:
        """|T| in dB on ``f_hz`` with the parts to build, (corners, frequencies)."""
        return None if self.loop_resp is None else 20.0 * np.log10(np.abs(self.loop_resp))

    def closed_loop_response(self, which: str) -> np.ndarray:
        """Closed-loop ``"zout"`` (output impedance, ohm) or ``"gvg"`` (line to output) on ``f_hz``.

        ``H / (1 + T)`` with the parts to build, shape (corners, frequencies).
        """
        if self.loop_resp is None:
            raise ValueError("no loop: the targets were infeasible")
        plant = {"zout": self.open_loop.zout, "gvg": self.open_loop.gvg}[which]
        return plant.response(self.f_hz) / (1.0 + self.loop_resp)


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
                                  self.uncompensated.phase_deg(self.f_hz), self.scheme.gvg, self.scheme.zout)
        self.plant_resp = self.stage.gvd.response(self.f_hz)
        self.r1 = _default_r1(design, self.ctx)
        self._rhp_min = np.nanmin(self.stage.f_rhp_hz) if np.any(np.isfinite(self.stage.f_rhp_hz)) else np.nan

    # ------------------------------------------------------------------ public
    def run(self, targets: Targets | None = None) -> LoopResult:
        """Synthesise (or analyse the design's given parts) and analyse every corner.

        With ``targets`` None and parts in the design, those parts are analysed
        as given; otherwise the network is synthesised for the targets (the
        design's own by default).
        """
        comp = self.design.compensator
        if targets is None and comp.parts:
            return self._analyse_given(Targets.from_design(self.design))
        targets = targets or Targets.from_design(self.design)
        return self._synthesise(targets)

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
    def _synthesise(self, targets: Targets) -> LoopResult:
        findings = list(self.stage.findings) + list(self.scheme.findings)
        findings.extend(self._target_findings(targets))
        if targets.fc_hz <= 0:
            return self._infeasible(targets, findings, "compensator.fc", targets.fc_hz, "give a crossover target > 0 Hz")
        fsw = self.design.stage.fsw
        if targets.fc_hz >= fsw / 2:
            return self._infeasible(targets, findings, "compensator.fc", format_value(targets.fc_hz, "Hz"),
                                    f"must be below half the switching frequency ({format_value(fsw / 2, 'Hz')}):"
                                    " the averaged model ends there")
        corner = self.design_corner(targets)
        module = network_module(targets.network)
        try:
            parts, placement = self._solve(module, targets, corner)
        except InfeasibleDesign as exc:
            parts, placement, failure = None, None, exc
        before = None if parts is None else self._shortfall(module, parts, targets)
        if targets.method == "auto" and module.ZEROS > 0 and (before is None or before[0] > 0):
            searched = self._search(module, targets, corner, placement)
            if searched is not None and (before is None or self._shortfall(module, searched[0], targets) < before):
                parts, placement = searched
        if parts is None:
            return self._infeasible(targets, findings, failure.field, failure.value, failure.allowed, failure.reasons)
        findings.extend(placement.notes)
        return self._assemble(targets, parts, placement, corner, findings)

    def _shortfall(self, module, parts: dict, targets: Targets) -> tuple[int, float]:
        """(number of corners missing a target, -worst PM excess) of a network: lower is better."""
        gc = module.transfer(parts, self.ctx)
        loop, _, resp, phase = self._loop_on_grid(gc)
        m = loop_margins(loop, self.f_hz, resp, phase, self.design.stage.fsw / 2)
        misses = verdict_findings(m, self.stage, targets, self.design.stage.fsw)
        worst = np.nanmin(np.where(m.stable, m.pm_deg, -180.0)) - targets.pm_deg
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
                                        _why_not_single_crossover(self.stage, corner, at_corner, 0,
                                                                  targets.network, targets.fc_hz))
        loop, comp_resp, resp, phase = self._loop_on_grid(gc)
        margins = loop_margins(loop, self.f_hz, resp, phase, self.design.stage.fsw / 2)
        zeros, poles = module.poles_zeros(parts, self.ctx)
        worst = _worst_corner(margins)
        findings.extend(eseries.part_warnings(parts))
        findings.extend(self._loop_findings(margins, targets))
        findings.extend(self._opamp_findings(module, parts))
        return LoopResult(
            design=_with_targets(self.design, targets), stage=self.stage, targets=targets, f_hz=self.f_hz,
            feasible=True,
            network=targets.network, parts_exact=dict(parts_exact), parts=parts, zeros_hz=tuple(zeros),
            poles_hz=tuple(poles), placement=placement, compensator=gc, compensator_exact=gc_exact, loop=loop,
            loop_exact=loop_x, plant_resp=self.plant_resp, comp_resp=comp_resp, loop_resp=resp,
            loop_phase_deg=phase, margins=margins, worst_corner=worst, design_corner=corner,
            findings=tuple(_unique(findings)), open_loop=self.open_loop,
        )

    def _infeasible(self, targets, findings, field_name, value, allowed, reasons=()) -> LoopResult:
        message = f"no parts: {field_name} = {value}: {allowed}"
        if reasons:
            message += " (" + "; ".join(reasons) + ")"
        findings = list(findings) + [Finding("infeasible", message, None)]
        return LoopResult(
            design=_with_targets(self.design, targets), stage=self.stage, targets=targets, f_hz=self.f_hz,
            feasible=False,
            network=targets.network, parts_exact={}, parts={}, zeros_hz=(), poles_hz=(), placement=None,
            compensator=None, compensator_exact=None, loop=None, loop_exact=None, plant_resp=self.plant_resp,
            comp_resp=None, loop_resp=None, loop_phase_deg=None, margins=None, worst_corner=-1, design_corner=-1,
            findings=tuple(_unique(findings)), open_loop=self.open_loop,
        )

    # ------------------------------------------------------------------ findings
    def _target_findings(self, targets: Targets) -> list[Finding]:
        out = []
        fc, fsw = targets.fc_hz, self.design.stage.fsw
        st = self.stage
        out.extend(model_findings(fc, fsw))
        if np.isfinite(self._rhp_min) and fc > self._rhp_min / 3:
            k = int(np.nanargmin(st.f_rhp_hz))
            out.append(Finding("rhp-zero", f"crossover {format_value(fc, 'Hz')} is above one third of the RHP zero"
                               f" ({format_value(self._rhp_min, 'Hz')} at {corner_label(st.vin[k], st.load[k])};"
                               " common practice): lower fc or raise the RHP zero (less inductance)", k))
        if targets.network in ("type2", "gm-type2", "opto-type2"):
            f0 = st.f0_hz
            no_esr = ~np.any(st.f_esr_hz < fc, axis=1)
            below = np.isfinite(f0) & (fc < f0) & no_esr
            if np.any(below):
                k = int(np.nonzero(below)[0][0])
                out.append(Finding("type2-below-f0", f"crossover {format_value(fc, 'Hz')} is below the double pole"
                                   f" ({format_value(f0[k], 'Hz')} at {corner_label(st.vin[k], st.load[k])}) and no ESR"
                                   " zero lies below fc: the LC resonance can cross 0 dB again; use Type III with"
                                   " fc above the double pole, or more damping", k))
        return out

    def _loop_findings(self, m: Margins, targets: Targets) -> list[Finding]:
        st = self.stage
        out = verdict_findings(m, st, targets, self.design.stage.fsw)
        for k in range(st.n_corners):
            where = corner_label(st.vin[k], st.load[k])
            if m.conditional[k]:
                out.append(Finding("conditional", f"{where}: conditionally stable: a gain drop of"
                                   f" {m.gm_low_db[k]:.1f} dB (an error amplifier recovering from saturation, a"
                                   " soft start) makes the loop unstable; raise the phase below the crossover (zeros"
                                   " nearer the double pole) or lower fc", k))
            if m.beyond_grid[k]:
                out.append(Finding("gain-at-fsw", f"{where}: |T| is still above 0 dB at the switching frequency", k))
            if m.gm_beyond_model[k]:
                out.append(Finding("gm-beyond-model", f"{where}: the phase reaches -180 deg only at"
                                   f" {format_value(m.f180_beyond_hz[k], 'Hz')}, above fsw/2, where the averaged model"
                                   " does not predict it: no gain margin is given; measure it", k, "note"))
        return out

    def _opamp_findings(self, module, parts: dict) -> list[Finding]:
        check = getattr(module, "gain_shortfall", None)
        if check is None or self.ctx.opamp.ideal:
            return []
        short = check(parts, self.ctx, self.f_hz)
        if short is None:
            return []
        return [Finding("opamp-gain", f"the network needs more gain than the op-amp has above"
                        f" {format_value(short, 'Hz')}: choose an op-amp with more gain-bandwidth", None)]


def _why_not_single_crossover(stage: StageResult, corner: int, m: Margins, row: int, network: str,
                              fc_hz: float) -> str:
    crossings = ", ".join(format_value(x, "Hz") for x in m.crossovers_hz[row])
    where = corner_label(stage.vin[corner], stage.load[corner])
    text = (f"the network puts a crossover at the target, but at {where} the loop gain crosses 0 dB"
            f" {m.n_crossovers[row]} times ({crossings})")
    if not m.stable[row]:
        text += " and the closed loop is unstable"
    f0 = stage.f0_hz[corner]
    if np.isfinite(f0):
        text += f"; the double pole at {format_value(f0, 'Hz')} (Q {stage.q[corner]:.1f}) peaks above 0 dB"
        if network != "type3":
            text += ": use Type III with fc above the double pole, or lower fc well below it"
        elif fc_hz > f0:
            text += ": move the zeros nearer the double pole (method auto or placement), or raise fc further above it"
        else:
            text += ": raise fc above the double pole, or lower it well below"
    return text


def _with_targets(design: Design, t: Targets) -> Design:
    """The design as the targets set it (parts as they were)."""
    c = design.compensator
    if Targets.from_design(design) == t:
        return design
    comp = replace(c, network=t.network, fc=t.fc_hz, pm=t.pm_deg, boost_split=t.boost_split,
                   design_corner=t.design_corner, resistor_series=t.resistor_series,
                   capacitor_series=t.capacitor_series, method=t.method, gm_db=t.gm_db, fc_band=t.fc_band)
    return replace(design, compensator=comp)


def _worst_corner(m: Margins) -> int:
    """Lowest phase margin; an unstable corner or one without crossover is worse still."""
    score = np.where(np.isfinite(m.pm_deg), m.pm_deg, -1e3)
    score = np.where(m.stable, score, -1e6 + np.nan_to_num(m.pm_deg, nan=0.0))
    return int(np.argmin(score))


def _unique(findings: list) -> list:
    seen, out = set(), []
    for f in findings:
        key = (f.code, f.message, f.corner)
        if key not in seen:
            seen.add(key)
            out.append(f)
    return out


def closed_loop(result: LoopResult, which: str, exact_parts: bool = False) -> Rational:
    """Closed-loop ``"zout"`` or ``"gvg"`` as a transfer function per corner: H (1 + T)^-1.

    With T = N/D (polynomials), H / (1 + T) = H D / (D + N); the roots of D + N
    are the closed-loop poles used for the stability verdict.
    """
    loop = result.loop_exact if exact_parts else result.loop
    if loop is None:
        raise ValueError("no loop: the targets were infeasible")
    plant = {"zout": result.open_loop.zout, "gvg": result.open_loop.gvg}[which]
    num, den = loop.polys()
    k = max(num.shape[1], den.shape[1])
    char = np.zeros((loop.n_corners, k))
    char[:, : num.shape[1]] += num
    char[:, : den.shape[1]] += den
    return plant * Rational.from_polys(den, char)


def design_loop(design: Design, targets: Targets | None = None, f_hz=None) -> LoopResult:
    """Synthesise and analyse in one call: ``LoopSession(design, f_hz).run(targets)``."""
    return LoopSession(design, f_hz).run(targets)


def apply_parts(design: Design, result: LoopResult) -> Design:
    """The design with the result's targets and snapped parts written back."""
    targeted = _with_targets(design, result.targets)
    comp = replace(targeted.compensator, parts={k: float(v) for k, v in result.parts.items()})
    return replace(targeted, compensator=comp)


def targets_with(targets: Targets, **changes) -> Targets:
    """A copy of ``targets`` with some fields changed."""
    return replace(targets, **changes)


