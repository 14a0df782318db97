"""Efficiency and loss breakdown at every corner; the four-switch stage's modes compared; curves.

:func:`efficiency` is what the CLI (``loopkit efficiency``), the app and the
design-review report read: per corner, every loss term in watts (named fields
of :class:`Efficiency`, arrays shaped (corners,)), output and input power and
the efficiency, at the operating point whose duty carries those losses (the
same duty :func:`loopkit.powerstage.analyse_stage` reports).  The formulas and
their sources are in :mod:`loopkit.loss_model`; the figures beyond conduction
come from the design's ``[losses]`` (:mod:`loopkit.losses`), and what it leaves
out is listed in :attr:`Efficiency.omitted`.

:func:`mode_efficiency` runs a four-switch stage's corners in each mode (buck,
boost, buck-boost with all four switches) at the same input and load, so the
cost of the mode rule shows; :func:`efficiency_curves` gives efficiency against
load for each input voltage.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from .loss_model import LOSS_FIELDS, buck_boost_mode, corner_points
from .stages import boost, four_switch

__all__ = [
    "LOSS_TITLES",
    "Curves",
    "Efficiency",
    "ModeEfficiency",
    "efficiency",
    "efficiency_curves",
    "mode_efficiency",
]

#: Loss term -> short title (CLI columns, report rows).
LOSS_TITLES = {
    "switch_w": "switch",
    "held_switch_w": "held on",
    "rectifier_w": "rectifier",
    "diode_w": "diode drop",
    "inductor_dcr_w": "DCR",
    "output_esr_w": "out ESR",
    "input_esr_w": "in ESR",
    "overlap_w": "overlap",
    "coss_w": "Coss",
    "recovery_w": "recovery",
    "dead_time_w": "dead time",
    "gate_w": "gate",
    "core_w": "core",
    "quiescent_w": "quiescent",
}

#: Figures of ``[losses]`` -> what the efficiency leaves out without them.
_OMISSIONS = (
    (("turn_on_s", "switching_charge_c"), "switching overlap (turn_on_time, turn_off_time or switching_charge)"),
    (("coss_switch_f", "coss_rectifier_f"), "output capacitances (coss_switch, coss_rectifier)"),
    (("recovery_charge_c",), "reverse recovery (recovery_charge)"),
    (("dead_time_s",), "dead-time conduction (dead_time, body_diode_drop)"),
    (("gate_charge_c",), "gate drive (gate_charge, gate_voltage)"),
    (("core_k",), "core loss (core_k, core_alpha, core_beta, core_volume, core_area, core_turns)"),
    (("input_esr_ohm",), "input capacitor ESR (input_esr)"),
    (("quiescent_w",), "controller quiescent power (quiescent_power)"),
)


@dataclass(frozen=True, eq=False)
class Efficiency:
    """Losses and efficiency at every corner; arrays shaped (corners,), powers in W.

    Attributes
    ----------
    vin, load, duty : ndarray
        Corner input voltage (V), load (A) and the duty with the losses that change it
        (:mod:`loopkit.loss_model`: conduction, dead time, core in DCM).
    mode : ndarray of str
        ``CCM`` or ``DCM``, with the four-switch mode (``CCM buck``, ``DCM boost``...).
    p_out_w, p_in_w, p_loss_w, efficiency : ndarray
        Output power ``|vout| load``, input power ``p_out_w + p_loss_w``, the sum of the loss
        terms, and ``p_out_w / p_in_w``.
    switch_w ... quiescent_w : ndarray
        One field per loss term (:data:`loopkit.loss_model.LOSS_FIELDS`, titles in
        :data:`LOSS_TITLES`): conduction in the controlled switch(es), a four-switch stage's
        switch held on, the rectifier's resistance and the diode's drop, the inductor's DCR,
        the output and input capacitors' ESR; switching overlap, output capacitances,
        reverse recovery, dead time, gate drive, core, controller.
    omitted : tuple of str
        Loss figures ``[losses]`` does not give (counted as zero).
    """

    vin: np.ndarray
    load: np.ndarray
    vout: float
    duty: np.ndarray
    mode: np.ndarray
    p_out_w: np.ndarray
    p_in_w: np.ndarray
    p_loss_w: np.ndarray
    efficiency: np.ndarray
    switch_w: np.ndarray
    held_switch_w: np.ndarray
    rectifier_w: np.ndarray
    diode_w: np.ndarray
    inductor_dcr_w: np.ndarray
    output_esr_w: np.ndarray
    input_esr_w: np.ndarray
    overlap_w: np.ndarray
    coss_w: np.ndarray
    recovery_w: np.ndarray
    dead_time_w: np.ndarray
    gate_w: np.ndarray
    core_w: np.ndarray
    quiescent_w: np.ndarray
    omitted: tuple

    @property
    def conduction_w(self) -> np.ndarray:
        """Switches, rectifier, diode drop, DCR and capacitor ESR, W."""
        return sum(getattr(self, k) for k in LOSS_FIELDS[:7])

    @property
    def switching_w(self) -> np.ndarray:
        """Overlap, output capacitances, recovery, dead time and gate drive, W."""
        return sum(getattr(self, k) for k in LOSS_FIELDS[7:12])

    def terms(self) -> dict[str, np.ndarray]:
        """Every loss term by field name (:data:`LOSS_FIELDS` order)."""
        return {k: getattr(self, k) for k in LOSS_FIELDS}

    def as_dict(self) -> dict:
        """Plain lists and numbers (JSON-ready; NaN as None)."""
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, np.ndarray):
                value = [None if isinstance(x, float) and not np.isfinite(x) else x for x in value.tolist()]
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out


def _omitted(design) -> tuple[str, ...]:
    lo, st = design.losses, design.stage
    out = []
    for names, text in _OMISSIONS:
        if all(getattr(lo, n) is None for n in names):
            if names == ("dead_time_s",) and not st.synchronous:
                continue
            out.append(text)
    if lo.dead_time_s is not None and not st.synchronous:
        out.append("dead time: given, but the rectifier is a diode (not counted)")
    return tuple(out)


def _result(design, p, terms) -> Efficiency:
    p_out = abs(design.operating.vout) * p.load
    p_loss = sum(terms.values())
    mode = np.where(p.dcm, "DCM", "CCM").astype(object)
    sub = np.asarray(p.label, dtype=object)
    mode = np.where(sub != "", mode + " " + sub, mode).astype(str)
    with np.errstate(invalid="ignore", divide="ignore"):
        eff = p_out / (p_out + p_loss)
    return Efficiency(vin=p.vin, load=p.load, vout=float(design.operating.vout), duty=p.duty, mode=mode,
                      p_out_w=p_out, p_in_w=p_out + p_loss, p_loss_w=p_loss, efficiency=eff,
                      omitted=_omitted(design), **terms)


def efficiency(design, stage=None) -> Efficiency:
    """Loss breakdown and efficiency at every corner of ``design``.

    Parameters
    ----------
    design : Design
    stage : StageResult, optional
        The stage analysed already (its refusals of corners the stage cannot reach have
        run); analysed here when not given.

    Returns
    -------
    Efficiency

    Raises
    ------
    DesignError
        From :func:`loopkit.powerstage.analyse_stage` (a corner the stage cannot make).

    Notes
    -----
    Formulas and sources: :mod:`loopkit.loss_model`.
    """
    if stage is None:
        from .powerstage import analyse_stage

        stage = analyse_stage(design)
    p, terms = corner_points(design, stage.vin, stage.load)
    return _result(design, p, terms)


#: Modes of the four-switch stage compared by :func:`mode_efficiency`.
MODES = ("buck", "boost", "buck-boost")


@dataclass(frozen=True, eq=False)
class ModeEfficiency:
    """A four-switch stage's corners run in each mode; arrays shaped (corners, modes).

    Attributes
    ----------
    modes : tuple of str
        ``("buck", "boost", "buck-boost")``: Q1/Q2 switching with Q4 on; Q3/Q4 switching
        with Q1 on; all four switching (Q1+Q3 on for D).
    efficiency, duty, p_loss_w : ndarray (corners, modes)
        NaN where the mode cannot make the output (buck at vin <= vout, boost at
        vin >= vout, or no duty below 1).
    rule : ndarray of str (corners,)
        The mode the stage's rule runs (``buck``, ``boost``; the transition band is
        modelled in one of them, see :mod:`loopkit.stages.four_switch`).
    rule_efficiency : ndarray (corners,)
        The efficiency at the rule's mode (as :func:`efficiency` reports it).
    """

    vin: np.ndarray
    load: np.ndarray
    modes: tuple
    efficiency: np.ndarray
    duty: np.ndarray
    p_loss_w: np.ndarray
    rule: np.ndarray
    rule_efficiency: np.ndarray

    @property
    def best(self) -> np.ndarray:
        """Name of the most efficient mode at each corner."""
        e = np.where(np.isfinite(self.efficiency), self.efficiency, -np.inf)
        return np.asarray(self.modes)[np.argmax(e, axis=1)]

    @property
    def cost_points(self) -> np.ndarray:
        """Efficiency points (percent) the rule's mode gives away to the best mode."""
        return 100.0 * (np.nanmax(self.efficiency, axis=1) - self.rule_efficiency)


def mode_efficiency(design, stage=None) -> ModeEfficiency:
    """Efficiency of every four-switch mode at each corner's input and load.

    Raises
    ------
    ValueError
        When the stage is not a four-switch buck-boost (a programming error: callers check).
    """
    if design.stage.topology != "four-switch-buck-boost":
        raise ValueError("mode_efficiency is for the four-switch buck-boost")
    base = efficiency(design, stage)
    vin, load, vout = base.vin, base.load, abs(design.operating.vout)
    n = vin.shape[0]
    st = design.stage
    eff, duty, loss = (np.full((n, len(MODES)), np.nan) for _ in range(3))
    runs = (
        (vin > vout, four_switch.as_buck(st), four_switch.buck_mode),
        (vin < vout, four_switch.as_boost(st), boost),
        (np.ones(n, bool), st, buck_boost_mode),
    )
    for j, (mask, stage_as_run, module) in enumerate(runs):
        idx = np.nonzero(mask)[0]
        if not idx.size:
            continue
        p, terms = corner_points(design, vin[idx], load[idx], [(np.arange(idx.size), stage_as_run, module, MODES[j])])
        r = _result(design, p, terms)
        ok = np.isfinite(r.duty) & (r.duty > 0) & (r.duty < 1)
        eff[idx, j] = np.where(ok, r.efficiency, np.nan)
        duty[idx, j] = np.where(ok, r.duty, np.nan)
        loss[idx, j] = np.where(ok, r.p_loss_w, np.nan)
    rule = np.array([m.split()[-1] for m in base.mode])
    from .stages import groups

    for idx, _, module, _label in groups(st, vin, load, design.operating.vout):
        rule[idx] = "buck" if module is four_switch.buck_mode else "boost"
    return ModeEfficiency(vin=vin, load=load, modes=MODES, efficiency=eff, duty=duty, p_loss_w=loss, rule=rule,
                          rule_efficiency=base.efficiency)


@dataclass(frozen=True, eq=False)
class Curves:
    """Efficiency against load for each input voltage.

    ``efficiency`` and ``p_loss_w`` are shaped (input voltages, loads); NaN where the stage
    cannot make the output.
    """

    vin: np.ndarray
    load: np.ndarray
    efficiency: np.ndarray
    p_loss_w: np.ndarray


def efficiency_curves(design, points: int = 25, load_min: float | None = None) -> Curves:
    """Efficiency at ``points`` loads, geometrically spaced, for every input voltage of the design.

    Parameters
    ----------
    design : Design
    points : int
        Loads per curve (2 to 200).
    load_min : float, optional
        Lightest load, A (default: the design's lightest, or a tenth of its heaviest when it
        gives one load).  The heaviest is the design's.
    """
    from .errors import DesignError

    if not isinstance(points, (int, np.integer)) or not 2 <= points <= 200:
        raise DesignError("--points", points, "must be a whole number from 2 to 200")
    loads = design.operating.load
    hi = max(loads)
    lo = load_min if load_min is not None else (min(loads) if len(loads) > 1 else hi / 10.0)
    if not 0 < lo < hi:
        raise DesignError("--load-min", lo, f"must be above 0 and below the heaviest load ({hi:g} A)")
    grid = np.geomspace(lo, hi, points)
    vin = np.asarray(design.operating.vin, float)
    vv = np.repeat(vin, points)
    ll = np.tile(grid, vin.size)
    p, terms = corner_points(design, vv, ll)
    r = _result(design, p, terms)
    ok = np.isfinite(r.duty) & (r.duty > 0) & (r.duty < 1)
    eff = np.where(ok, r.efficiency, np.nan).reshape(vin.size, points)
    loss = np.where(ok, r.p_loss_w, np.nan).reshape(vin.size, points)
    return Curves(vin=vin, load=grid, efficiency=eff, p_loss_w=loss)
