"""Where the compensator's poles and zeros go, and whether the targets can be met.

Two methods (``compensator.method``):

``k-factor``
    H. D. Venable, "The K Factor: A New Mathematical Tool for Stability
    Analysis and Synthesis", Proc. Powercon 10, 1983.  At the crossover fc the
    uncompensated loop Tu = H Fm Gvd has phase P; the network must supply the
    boost ``PM - P - 90`` deg on top of its integrator and the gain
    ``1 / |Tu(fc)|``.  Type II: one zero-pole pair, K = tan(boost/2 + 45),
    zero fc/K, pole fc K.  Type III: two pairs; with the boost split evenly
    this is Venable's K = tan^2(boost/4 + 45) with the double zero at
    fc/sqrt(K) and double pole at fc sqrt(K); ``boost_split`` gives the first
    pair that share of the boost instead.  The placements are exact for the
    ideal networks (each pair's phase at fc is 2 atan(K) - 90 deg), so the
    designed loop meets fc and PM at the design corner.
``placement``
    The designer gives the zeros and poles (Hz); missing ones default to the
    zeros at the double pole of the design corner and the poles at the lowest
    ESR or RHP zero and at half the switching frequency.  The gain still puts
    the crossover at fc; the phase margin is what it is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import Finding, InfeasibleDesign
from .networks import network_module
from .units import format_value

__all__ = ["Placement", "boost_limits", "pair_k", "place"]

MIN_PAIR_BOOST = 1.0  # deg: below this a zero-pole pair is pointless


def boost_limits(network: str) -> tuple[float, float]:
    """(practical, hard) phase-boost limits of a network, deg (from the network's own module)."""
    module = network_module(network)
    return module.PRACTICAL_BOOST_DEG, module.HARD_BOOST_DEG


def pair_k(boost_deg):
    """Venable's K of one zero-pole pair giving ``boost_deg`` at the crossover."""
    return np.tan(np.radians(np.asarray(boost_deg) / 2.0 + 45.0))


@dataclass(frozen=True)
class Placement:
    """Poles, zeros and gain the network must realise.

    Attributes
    ----------
    fc_hz : float
        Crossover target.
    gain_at_fc : float
        |Gc(j 2 pi fc)| required (V/V).
    zeros_hz, poles_hz : tuple of float
        Network zeros and non-origin poles (positive Hz: left-half-plane roots).
    boost_deg : float
        Phase boost the placement gives at fc (above the integrator's -90 deg).
    required_boost_deg : float
        Boost needed for the target phase margin.
    plant_phase_deg : float
        Phase of Tu at fc (Venable's P).
    k_factor : float
        K (Type II: of the pair; Type III: Venable's overall K); NaN for Type I
        and for explicit placement.
    corner : int
        The design corner.
    notes : tuple of Finding
    """

    fc_hz: float
    gain_at_fc: float
    zeros_hz: tuple
    poles_hz: tuple
    boost_deg: float
    required_boost_deg: float
    plant_phase_deg: float
    k_factor: float
    corner: int
    notes: tuple = ()


def place(network: str, method: str, fc_hz: float, pm_deg: float, tu_fc: complex, tu_phase_deg: float,
          corner: int, boost_split: float = 0.5, placement: dict | None = None,
          defaults: dict | None = None) -> Placement:
    """Plan the network for a crossover ``fc_hz`` and margin ``pm_deg`` at one corner.

    Parameters
    ----------
    network : str
        Network name (loopkit.design.NETWORKS).
    method : str
        ``"k-factor"`` or ``"placement"``.
    fc_hz, pm_deg : float
        Targets.
    tu_fc : complex
        Uncompensated loop Tu(j 2 pi fc) at the design corner.
    tu_phase_deg : float
        Its continuous phase (deg), e.g. -150 for a buck above its double pole.
    corner : int
        Index of the design corner (reported only).
    boost_split : float
        Type III: share of the boost given by the first zero-pole pair.
    placement : dict
        ``method="placement"``: ``fz``, ``fp`` (Type II) or ``fz1``, ``fz2``,
        ``fp1``, ``fp2`` (Type III), Hz.
    defaults : dict
        Default placement frequencies: ``f_zero`` (double pole) and ``f_pole1``
        (lowest ESR/RHP zero), ``f_pole2`` (half the switching frequency).

    Raises
    ------
    InfeasibleDesign
        When the network cannot give the boost the target needs.
    """
    gain = 1.0 / abs(tu_fc)
    required = pm_deg - tu_phase_deg - 90.0
    practical, hard = boost_limits(network)
    notes = []
    module = network_module(network)
    label = module.SHORT_TITLE
    if method == "placement" and module.ZEROS > 0:
        zeros, poles = _explicit(network, placement or {}, defaults or {})
        fc = fc_hz
        boost = float(sum(np.degrees(np.arctan(fc / z)) for z in zeros) - sum(np.degrees(np.arctan(fc / p)) for p in poles))
        return Placement(fc_hz, gain, zeros, poles, boost, required, tu_phase_deg, float("nan"), corner, ())
    if module.ZEROS == 0:
        if required > 0.05:
            raise InfeasibleDesign(
                "compensator.pm", pm_deg,
                f"a Type I integrator gives only {90 + tu_phase_deg:.1f} deg of phase margin at"
                f" {format_value(fc_hz, 'Hz')}; use Type II or III, or lower the crossover",
                (f"needs {required:.1f} deg of boost; Type I gives none",))
        return Placement(fc_hz, gain, (), (), 0.0, required, tu_phase_deg, float("nan"), corner,
                         (Finding("pm-above-target", f"Type I gives {90 + tu_phase_deg:.1f} deg of phase margin"
                                  f" (target {pm_deg:g} deg)", corner, "note"),) if required < -0.05 else ())
    if required >= hard:
        raise InfeasibleDesign(
            "compensator.fc", format_value(fc_hz, "Hz"),
            f"the target needs {required:.1f} deg of phase boost at {format_value(fc_hz, 'Hz')} but a {label}"
            f" network gives less than {hard:.0f} deg; lower the crossover, "
            + ("use Type III, " if module.ZEROS < 2 else "")
            + "or add output capacitance / an ESR zero",
            (f"plant phase at fc is {tu_phase_deg:.1f} deg; boost needed {required:.1f} deg",))
    if required > practical:
        limit = {"op-amp": "the op-amp's gain-bandwidth will matter",
                 "transconductance": "the amplifier's output resistance and the high-frequency capacitor will matter",
                 "optocoupler": "the optocoupler's own pole will matter"}[module.AMPLIFIER]
        notes.append(Finding(
            "boost-practical",
            f"{label} boost of {required:.1f} deg exceeds the practical {practical:.0f} deg (common practice):"
            f" parts spread widely and {limit}; lower fc" + (" or use Type III" if module.ZEROS < 2 else ""), corner))
    boost = required
    n_pairs = module.ZEROS
    if boost < MIN_PAIR_BOOST * n_pairs:
        notes.append(Finding(
            "pm-above-target",
            f"the target phase margin needs {'no' if boost <= 0 else f'only {boost:.1f} deg of'} phase boost at"
            f" {format_value(fc_hz, 'Hz')}; the {label} network gives its minimum {MIN_PAIR_BOOST * n_pairs:.0f} deg,"
            " so the margin is higher than asked (a Type I integrator may do)", corner, "note"))
        boost = MIN_PAIR_BOOST * n_pairs
    if n_pairs == 2:
        b1 = boost * boost_split
        b2 = boost - b1
        for b in (b1, b2):
            if b >= 90.0:
                raise InfeasibleDesign(
                    "compensator.boost_split", boost_split,
                    f"a zero-pole pair gives less than 90 deg; with {boost:.1f} deg needed, choose a split"
                    f" nearer 0.5", (f"pair boosts {b1:.1f} and {b2:.1f} deg",))
        b1, b2 = max(b1, MIN_PAIR_BOOST * 0.5), max(b2, MIN_PAIR_BOOST * 0.5)
        k1, k2 = float(pair_k(b1)), float(pair_k(b2))
        zeros, poles = (fc_hz / k1, fc_hz / k2), (fc_hz * k1, fc_hz * k2)
        k_total = float(pair_k(boost / 2.0) ** 2)
        return Placement(fc_hz, gain, zeros, poles, b1 + b2, required, tu_phase_deg, k_total, corner, tuple(notes))
    k = float(pair_k(boost))
    return Placement(fc_hz, gain, (fc_hz / k,), (fc_hz * k,), boost, required, tu_phase_deg, k, corner, tuple(notes))


def _explicit(network: str, placement: dict, defaults: dict) -> tuple[tuple, tuple]:
    fz = defaults.get("f_zero")
    fp1 = defaults.get("f_pole1")
    fp2 = defaults.get("f_pole2")
    if network_module(network).ZEROS == 2:
        zeros = (placement.get("fz1", fz), placement.get("fz2", placement.get("fz1", fz)))
        poles = (placement.get("fp1", fp1), placement.get("fp2", fp2))
    else:
        zeros = (placement.get("fz", fz),)
        poles = (placement.get("fp", fp1),)
    for name, value in zip(("zero", "zero", "pole", "pole"), zeros + poles):
        if value is None or not (value > 0):
            raise InfeasibleDesign("compensator.placement", value, f"every {name} must be a frequency > 0 Hz")
    return tuple(float(z) for z in zeros), tuple(float(p) for p in poles)
