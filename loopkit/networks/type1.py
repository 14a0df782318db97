"""Type I network: inverting op-amp integrator.

Circuit: R1 (the divider's top resistor) from ``in`` to the inverting input,
C1 from the inverting input to ``out``, Rb (divider bottom, dc only) from the
inverting input to ground, the non-inverting input at vref.  With an ideal
amplifier::

    H(s) = -1 / (s R1 C1)

Synthesis: ``|H(j 2 pi fc)| = G`` gives ``C1 = 1 / (2 pi fc G R1)``, which is
also Venable's Type 1 formula (H. D. Venable, "The K Factor", Proc. Powercon
10, 1983; from memory).  The network places no zero and no pole besides the
integrator.
"""

from __future__ import annotations

from ..rational import TWO_PI, Rational
from .opamp import (
    InvertingNetwork,
    check_frequencies,
    check_parts,
    check_targets,
    divider_parts,
    fixed_r1,
    gain_checks,
    inverting_netlist,
    inverting_transfer,
    shunt_of,
    y_capacitor,
    y_resistor,
)
from .spice import spice_number as sn

__all__ = [
    "AMPLIFIER",
    "DESIGNATORS",
    "HARD_BOOST_DEG",
    "NAME",
    "OPTIONAL_DESIGNATORS",
    "POLES",
    "PRACTICAL_BOOST_DEG",
    "SHORT_TITLE",
    "TITLE",
    "ZEROS",
    "draw",
    "gain_need",
    "gain_shortfall",
    "inverting_network",
    "netlist",
    "poles_zeros",
    "synthesise",
    "transfer",
]

NAME = "Type I"

#: Parts the transfer function needs.  The divider's bottom resistor ``Rb`` (dc only,
#: ``R1 vref / (v_sensed - vref)``) is added by :func:`synthesise` when the sensed
#: voltage is above vref; when a part list lacks it, it is computed from R1 and the
#: context (it matters only with a finite-gain op-amp).
#: The network's identity: design-file name, titles, amplifier kind and phase-boost limits (deg; one
#: zero-pole pair tends to 90 deg as K grows, two pairs to 180; the practical limits, beyond which the
#: parts spread over many decades, are common practice, no source).
NAME = "type1"
TITLE = "Type I (integrator), op-amp"
SHORT_TITLE = "Type I"
AMPLIFIER = "op-amp"
HARD_BOOST_DEG = 0.0
PRACTICAL_BOOST_DEG = 0.0
OPTIONAL_DESIGNATORS = ("Rb",)
DESIGNATORS = ("R1", "C1")
ZEROS = 0
POLES = 0
_AC_PARTS = ("R1", "C1")


def inverting_network(parts: dict, ctx) -> InvertingNetwork:
    """Admittances of the network (input R1, feedback C1, shunt Rb)."""
    p = check_parts(parts, _AC_PARTS, NAME)
    return InvertingNetwork(yi=y_resistor(p["R1"]), yf=y_capacitor(p["C1"]), yg=shunt_of(parts, ctx))


def transfer(parts: dict, ctx) -> Rational:
    """V(out)/V(in), signed; finite op-amp gain/GBW included when ``ctx.opamp`` has them."""
    if ctx.opamp.ideal:
        p = check_parts(parts, _AC_PARTS, NAME)
        return Rational.from_factors(-1.0 / (p["R1"] * p["C1"]), num=[], den=[(0.0, 1.0)])
    return inverting_transfer(inverting_network(parts, ctx), ctx.opamp)


def poles_zeros(parts: dict, ctx) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """``((), (0,))``: the integrator only (ideal amplifier)."""
    check_parts(parts, _AC_PARTS, NAME)
    return (), (0.0,)


def synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx, fixed) -> dict:
    """Parts for ``|H(j 2 pi fc)| = gain_at_fc``: ``C1 = 1 / (2 pi fc G R1)``.

    Parameters
    ----------
    fc_hz : float
        Crossover frequency, Hz.
    gain_at_fc : float
        Required magnitude at fc, V/V.
    zeros_hz, poles_hz : empty sequences
        Type I places none.
    ctx : NetworkContext
    fixed : dict
        Must hold ``R1`` (ohm); other entries are not used.

    Returns
    -------
    dict
        ``R1``, ``C1`` and ``Rb`` (when the sensed voltage is above vref).
    """
    fc, g = check_targets(NAME, fc_hz, gain_at_fc)
    check_frequencies(NAME, zeros_hz, (), "zeros")
    check_frequencies(NAME, poles_hz, (), "poles")
    r1 = fixed_r1(NAME, fixed)
    c1 = 1.0 / (TWO_PI * fc * g * r1)
    return {"R1": r1, **divider_parts(r1, ctx), "C1": c1}


def netlist(parts: dict, ctx, title: str) -> str:
    """ngspice deck: AC source at ``in``, error-amplifier output at ``out``."""
    p = check_parts(parts, _AC_PARTS, NAME)
    full = {**p, **({"Rb": parts["Rb"]} if "Rb" in parts else {})}
    return inverting_netlist(
        [f"R1 in inv {sn(p['R1'])}", f"C1 inv out {sn(p['C1'])}"],
        full,
        ctx,
        title,
        comments=["Type I: R1 input, C1 feedback (integrator)"],
    )


gain_need, gain_shortfall = gain_checks(inverting_network, poles_zeros)


def draw(sheet, ctx) -> None:
    """Draw the network on a :mod:`loopkit.schematic` sheet (its parts and values are the sheet's)."""
    from ..schematic import draw_opamp_network

    draw_opamp_network(sheet, NAME, ctx)
