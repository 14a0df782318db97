"""Type II network: inverting op-amp, integrator plus one zero and one pole.

Circuit (literature designators)::

    in --R1--+-- inv (op-amp -)        feedback inv -> out:
             |                           R2 in series with C1,
             Rb (dc only)                C2 across both
             |
            gnd                        op-amp + at vref (AC ground)

With an ideal amplifier::

    H(s) = -(1 + s R2 C1) / (s R1 (C1 + C2) (1 + s R2 C1 C2 / (C1 + C2)))

zero ``fz = 1 / (2 pi R2 C1)``, pole ``fp = (C1 + C2) / (2 pi R2 C1 C2)``,
integrator ``1 / (2 pi R1 (C1 + C2))`` (its unity-gain frequency).

Synthesis (exact, any placement fz < fp): ``fp/fz = 1 + C1/C2`` fixes the
capacitor ratio and the magnitude at fc fixes ``C1 + C2``::

    C1 + C2 = sqrt(1 + (fc/fz)^2) / (2 pi fc R1 G sqrt(1 + (fc/fp)^2))
    C2 = (C1 + C2) fz / fp,  C1 = (C1 + C2) - C2,  R2 = 1 / (2 pi fz C1)

With Venable's placement fz = fc/K, fp = fc K this reduces to his
``C2 = 1/(2 pi fc G K R1)``, ``C1 = C2 (K^2 - 1)``, ``R2 = K/(2 pi fc C1)``
(H. D. Venable, "The K Factor", Proc. Powercon 10, 1983; from memory).
"""

from __future__ import annotations

import math

from ..errors import InfeasibleDesign
from ..rational import TWO_PI, Rational
from ..units import format_value
from .opamp import (
    InvertingNetwork,
    check_frequencies,
    check_parts,
    check_targets,
    divider_parts,
    factor_rows,
    fixed_r1,
    gain_checks,
    inverting_netlist,
    inverting_transfer,
    shunt_of,
    y_capacitor,
    y_resistor,
    y_series_rc,
    y_sum,
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

NAME = "Type II"

#: Parts the transfer function needs.  The divider's bottom resistor ``Rb`` (dc only,
#: ``R1 vref / (v_sensed - vref)``) is added by :func:`synthesise` when the sensed
#: voltage is above vref; when a part list lacks it, it is computed from R1 and the
#: context (it matters only with a finite-gain op-amp).
#: The network's identity: design-file name, titles, amplifier kind and phase-boost limits (deg; one
#: zero-pole pair tends to 90 deg as K grows, two pairs to 180; the practical limits, beyond which the
#: parts spread over many decades, are common practice, no source).
NAME = "type2"
TITLE = "Type II, op-amp"
SHORT_TITLE = "Type II"
AMPLIFIER = "op-amp"
HARD_BOOST_DEG = 90.0
PRACTICAL_BOOST_DEG = 75.0
OPTIONAL_DESIGNATORS = ("Rb",)
DESIGNATORS = ("R1", "R2", "C1", "C2")
ZEROS = 1
POLES = 1
_AC_PARTS = ("R1", "R2", "C1", "C2")


def inverting_network(parts: dict, ctx) -> InvertingNetwork:
    """Admittances of the network (input R1, feedback R2-C1 || C2, shunt Rb)."""
    p = check_parts(parts, _AC_PARTS, NAME)
    return InvertingNetwork(
        yi=y_resistor(p["R1"]),
        yf=y_sum(y_series_rc(p["R2"], p["C1"]), y_capacitor(p["C2"])),
        yg=shunt_of(parts, ctx),
    )


def transfer(parts: dict, ctx) -> Rational:
    """V(out)/V(in), signed; finite op-amp gain/GBW included when ``ctx.opamp`` has them."""
    if ctx.opamp.ideal:
        p = check_parts(parts, _AC_PARTS, NAME)
        c_sum = p["C1"] + p["C2"]
        c_series = p["C1"] * p["C2"] / c_sum
        return Rational.from_factors(
            -1.0 / (p["R1"] * c_sum),
            num=factor_rows([(1.0, p["R2"] * p["C1"])]),
            den=factor_rows([(0.0, 1.0), (1.0, p["R2"] * c_series)]),
        )
    return inverting_transfer(inverting_network(parts, ctx), ctx.opamp)


def poles_zeros(parts: dict, ctx) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """``((fz,), (0, fp))`` in Hz for an ideal amplifier."""
    p = check_parts(parts, _AC_PARTS, NAME)
    fz = 1.0 / (TWO_PI * p["R2"] * p["C1"])
    fp = (p["C1"] + p["C2"]) / (TWO_PI * p["R2"] * p["C1"] * p["C2"])
    return (fz,), (0.0, fp)


def synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx, fixed) -> dict:
    """Exact parts for zero ``zeros_hz[0]``, pole ``poles_hz[0]`` and ``|H(fc)| = gain_at_fc``.

    Parameters
    ----------
    fc_hz : float
        Crossover frequency, Hz.
    gain_at_fc : float
        Required magnitude ``|H(j 2 pi fc)|``, V/V.
    zeros_hz, poles_hz : sequence of one float
        ``(fz,)`` and ``(fp,)``, Hz, with ``fp > fz``.
    ctx : NetworkContext
    fixed : dict
        Must hold ``R1`` (ohm); other entries are not used (with R1 fixed the
        placement determines every other part).

    Returns
    -------
    dict
        ``R1, R2, C1, C2`` and ``Rb`` (when the sensed voltage is above vref).

    Raises
    ------
    InfeasibleDesign
        The pole is not above the zero.
    """
    fc, g = check_targets(NAME, fc_hz, gain_at_fc)
    (fz,) = check_frequencies(NAME, zeros_hz, ("fz",), "zeros")
    (fp,) = check_frequencies(NAME, poles_hz, ("fp",), "poles")
    r1 = fixed_r1(NAME, fixed)
    if not fp > fz:
        raise InfeasibleDesign(
            "compensator.placement.fp",
            format_value(fp, "Hz"),
            f"must be above the zero fz = {format_value(fz, 'Hz')}",
            reasons=(
                "a Type II network's pole lies above its zero (fp/fz = 1 + C1/C2 > 1)",
                "place the pole above the zero, or ask for less phase boost",
            ),
        )
    c_sum = math.sqrt(1.0 + (fc / fz) ** 2) / (TWO_PI * fc * r1 * g * math.sqrt(1.0 + (fc / fp) ** 2))
    c2 = c_sum * fz / fp
    c1 = c_sum * (1.0 - fz / fp)
    r2 = 1.0 / (TWO_PI * fz * c1)
    return {"R1": r1, **divider_parts(r1, ctx), "R2": r2, "C1": c1, "C2": c2}


def netlist(parts: dict, ctx, title: str) -> str:
    """ngspice deck: AC source at ``in``, error-amplifier output at ``out``."""
    p = check_parts(parts, _AC_PARTS, NAME)
    full = {**p, **({"Rb": parts["Rb"]} if "Rb" in parts else {})}
    return inverting_netlist(
        [
            f"R1 in inv {sn(p['R1'])}",
            f"R2 inv nr2 {sn(p['R2'])}",
            f"C1 nr2 out {sn(p['C1'])}",
            f"C2 inv out {sn(p['C2'])}",
        ],
        full,
        ctx,
        title,
        comments=["Type II: R1 input; R2 in series with C1, C2 across both, in the feedback"],
    )


gain_need, gain_shortfall = gain_checks(inverting_network, poles_zeros)


def draw(sheet, ctx) -> None:
    """Draw the network on a :mod:`loopkit.schematic` sheet (its parts and values are the sheet's)."""
    from ..schematic import draw_opamp_network

    draw_opamp_network(sheet, NAME, ctx)
