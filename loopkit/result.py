"""What a loop design gives: targets in, a :class:`LoopResult` out.

:class:`Targets` is what the designer asks of the loop; :class:`LoopResult`
everything the designer sees about it (parts, transfer functions, margins,
findings), computed by :class:`loopkit.loop.LoopSession`.  A result is data: it
keeps the uncompensated loop it was computed on (:class:`OpenLoop`), not the
session.

Sign convention: the uncompensated loop ``Tu`` runs from the error amplifier's
output back to its input (sensing x control scheme x plant) and the loop gain is
``T = -Tu Gc``, where the error-amplifier network ``Gc`` is inverting (negative
at low frequency).  A correctly wired loop therefore has T(0) > 0 and is
analysed in the form 1 + T.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field, replace

import numpy as np

from .design import Design
from .margins import Margins, loop_margins
from .powerstage import StageResult, corner_label
from .rational import Rational
from .synthesis import Placement

__all__ = ["LoopResult", "OpenLoop", "Targets", "apply_parts", "closed_loop", "targets_with", "with_targets"]


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
        return cls(c.network, c.fc_hz, c.pm_deg, c.boost_split, c.design_corner, c.resistor_series,
                   c.capacitor_series, c.method, c.gm_db, c.fc_band)


@dataclass(frozen=True, eq=False)
class OpenLoop:
    """The uncompensated loop Tu per corner and on the analysis grid (response, continuous phase), and the
    line-to-output and output impedance of the plant with the scheme's inner loops closed; ``figures`` are the
    control scheme's own per-corner figures (e.g. ``qp``, ``mc`` of peak current mode)."""

    tu: Rational
    resp: np.ndarray
    phase_deg: np.ndarray
    gvg: Rational
    zout: Rational
    figures: dict = field(default_factory=dict)

    def with_network(self, gc: Rational, f_hz: np.ndarray, corner: int | None = None,
                     gc_on_grid: tuple[np.ndarray, np.ndarray] | None = None):
        """(T, Gc on the grid, T on the grid, continuous phase of T) with the network ``gc``, every corner or one.

        T = -Tu Gc; its continuous phase is the sum of the parts' factor angles, corrected for the
        signs of the parts' gains and of the product's.  ``gc_on_grid``: Gc's response and continuous
        phase on ``f_hz`` when already known (a tolerance study evaluates each draw's network once
        for all its corners).
        """
        tu = self.tu if corner is None else self.tu.take(corner)
        tu_resp = self.resp if corner is None else self.resp[corner:corner + 1]
        tu_phase = self.phase_deg if corner is None else self.phase_deg[corner:corner + 1]
        loop = -(tu * gc)
        comp_resp = gc.response(f_hz) if gc_on_grid is None else gc_on_grid[0]
        resp = -tu_resp * comp_resp
        phase = (tu_phase + (gc.phase_deg(f_hz) if gc_on_grid is None else gc_on_grid[1])
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
    #: The digital side (:class:`loopkit.digital_loop.DigitalLoop`) when the control scheme is digital; then
    #: ``compensator`` and ``loop`` are :class:`loopkit.discrete.Discrete` (T = Tu(z) C(z)) and there are no parts.
    digital: object = None

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


def with_targets(design: Design, t: Targets) -> Design:
    """The design as the targets set it (parts as they were)."""
    c = design.compensator
    if Targets.from_design(design) == t:
        return design
    comp = replace(c, network=t.network, fc_hz=t.fc_hz, pm_deg=t.pm_deg, boost_split=t.boost_split,
                   design_corner=t.design_corner, resistor_series=t.resistor_series,
                   capacitor_series=t.capacitor_series, method=t.method, gm_db=t.gm_db, fc_band=t.fc_band)
    return replace(design, compensator=comp)


def closed_loop(result: LoopResult, which: str, exact_parts: bool = False) -> Rational:
    """Closed-loop ``"zout"`` or ``"gvg"`` as a transfer function per corner: H (1 + T)^-1.

    ``H`` is the scheme's line-to-output or output impedance (inner loops closed, the outer loop
    open); ``1 / (1 + T)`` is :meth:`Rational.feedback` of 1 around T, whose poles are the roots
    of 1 + T used for the stability verdict.
    """
    loop = result.loop_exact if exact_parts else result.loop
    if loop is None:
        raise ValueError("no loop: the targets were infeasible")
    plant = {"zout": result.open_loop.zout, "gvg": result.open_loop.gvg}[which]
    return plant * Rational.constant(1.0, loop.n_corners).feedback(loop)


def apply_parts(design: Design, result: LoopResult) -> Design:
    """The design with the result's targets and snapped parts written back."""
    targeted = with_targets(design, result.targets)
    comp = replace(targeted.compensator, parts={k: float(v) for k, v in result.parts.items()})
    return replace(targeted, compensator=comp)


def targets_with(targets: Targets, **changes) -> Targets:
    """A copy of ``targets`` with some fields changed."""
    return replace(targets, **changes)
