"""Type III network: inverting op-amp, integrator plus two zeros and two poles.

Circuit (literature designators)::

    in --+--R1---------+-- inv (op-amp -)     feedback inv -> out:
         |             |                        R2 in series with C1,
         +--R3--C3-----+                        C2 across both
                       |
                       Rb (dc only) to gnd    op-amp + at vref (AC ground)

With an ideal amplifier::

    H(s) = -(1 + s R2 C1) (1 + s (R1 + R3) C3)
           / (s R1 (C1 + C2) (1 + s R2 C1 C2/(C1 + C2)) (1 + s R3 C3))

Which RC pair makes which root
------------------------------
- the feedback branch: zero ``1/(2 pi R2 C1)`` and pole
  ``(C1 + C2)/(2 pi R2 C1 C2)``, ratio pole/zero ``1 + C1/C2``;
- the input branch: zero ``1/(2 pi (R1 + R3) C3)`` and pole
  ``1/(2 pi R3 C3)``, ratio pole/zero ``1 + R1/R3``.

Each branch's pole lies above its zero.  :func:`synthesise` sorts the given
zeros ``za <= zb`` and poles ``pa <= pb``.  When both poles lie above both
zeros (the usual placement: zeros near the double pole, poles at the ESR zero
and half the switching frequency) the feedback branch makes the lower zero za
and the upper pole pb, and the input branch makes the upper zero zb and the
lower pole pa (so R3-C3 sets the pole that usually cancels the ESR zero).
When a pole lies between the zeros (za < pa <= zb < pb) the feedback branch
makes (za, pa) and the input branch (zb, pb).  Otherwise no Type III network
exists (a pole at or below its zero) and :class:`InfeasibleDesign` is raised.

Synthesis, R1 fixed (exact; ``fz_i, fp_i`` the input pair, ``fz_f, fp_f`` the
feedback pair)::

    C3 = (1/(2 pi fz_i) - 1/(2 pi fp_i)) / R1,   R3 = R1 / (fp_i/fz_i - 1)
    C1 + C2 = prod sqrt(1 + (fc/fz)^2) / (2 pi fc R1 G prod sqrt(1 + (fc/fp)^2))
    C2 = (C1 + C2) fz_f / fp_f,   C1 = (C1 + C2) - C2,   R2 = 1/(2 pi fz_f C1)

With Venable's placement (double zero fc/sqrt K, double pole fc sqrt K) this
gives his ``C2 = 1/(2 pi fc G R1)``, ``C1 = C2 (K - 1)``,
``R2 = sqrt K/(2 pi fc C1)``, ``R3 = R1/(K - 1)``,
``C3 = 1/(2 pi fc sqrt K R3)`` (H. D. Venable, "The K Factor", Proc.
Powercon 10, 1983; from memory).
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
    "pairing",
    "poles_zeros",
    "synthesise",
    "transfer",
]

NAME = "Type III"

#: Parts the transfer function needs.  The divider's bottom resistor ``Rb`` (dc only,
#: ``R1 vref / (v_sensed - vref)``) is added by :func:`synthesise` when the sensed
#: voltage is above vref; when a part list lacks it, it is computed from R1 and the
#: context (it matters only with a finite-gain op-amp).
#: The network's identity: design-file name, titles, amplifier kind and phase-boost limits (deg; one
#: zero-pole pair tends to 90 deg as K grows, two pairs to 180; the practical limits, beyond which the
#: parts spread over many decades, are common practice, no source).
NAME = "type3"
TITLE = "Type III, op-amp"
SHORT_TITLE = "Type III"
AMPLIFIER = "op-amp"
HARD_BOOST_DEG = 180.0
PRACTICAL_BOOST_DEG = 150.0
OPTIONAL_DESIGNATORS = ("Rb",)
DESIGNATORS = ("R1", "R2", "R3", "C1", "C2", "C3")
ZEROS = 2
POLES = 2
_AC_PARTS = ("R1", "R2", "R3", "C1", "C2", "C3")


def inverting_network(parts: dict, ctx) -> InvertingNetwork:
    """Admittances: input R1 || (R3-C3), feedback (R2-C1) || C2, shunt Rb."""
    p = check_parts(parts, _AC_PARTS, NAME)
    return InvertingNetwork(
        yi=y_sum(y_resistor(p["R1"]), y_series_rc(p["R3"], p["C3"])),
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
            num=factor_rows([(1.0, p["R2"] * p["C1"]), (1.0, (p["R1"] + p["R3"]) * p["C3"])]),
            den=factor_rows([(0.0, 1.0), (1.0, p["R2"] * c_series), (1.0, p["R3"] * p["C3"])]),
        )
    return inverting_transfer(inverting_network(parts, ctx), ctx.opamp)


def poles_zeros(parts: dict, ctx) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """``((fz_a, fz_b), (0, fp_a, fp_b))`` in Hz, each sorted, for an ideal amplifier."""
    p = check_parts(parts, _AC_PARTS, NAME)
    zeros = sorted((1.0 / (TWO_PI * p["R2"] * p["C1"]), 1.0 / (TWO_PI * (p["R1"] + p["R3"]) * p["C3"])))
    c_series = p["C1"] * p["C2"] / (p["C1"] + p["C2"])
    poles = sorted((1.0 / (TWO_PI * p["R2"] * c_series), 1.0 / (TWO_PI * p["R3"] * p["C3"])))
    return tuple(zeros), (0.0, *poles)


def pairing(zeros_hz, poles_hz) -> tuple[tuple[float, float], tuple[float, float]]:
    """Which zero and pole each branch makes: ``((fz_f, fp_f), (fz_i, fp_i))``.

    ``_f`` is the feedback branch (R2, C1, C2), ``_i`` the input branch
    (R3, C3); the rule is in the module notes.

    Raises
    ------
    InfeasibleDesign
        A pole at or below the zero it would have to pair with.
    """
    zeros = check_frequencies(NAME, zeros_hz, ("fz1", "fz2"), "zeros")
    poles = check_frequencies(NAME, poles_hz, ("fp1", "fp2"), "poles")
    order_z = sorted(range(2), key=lambda i: zeros[i])
    order_p = sorted(range(2), key=lambda i: poles[i])
    (za, zb), (pa, pb) = [zeros[i] for i in order_z], [poles[i] for i in order_p]
    for k, (z, p) in enumerate(((za, pa), (zb, pb))):
        if not p > z:
            which = ("lower", "upper")[k]
            raise InfeasibleDesign(
                f"compensator.placement.fp{order_p[k] + 1}",
                format_value(p, "Hz"),
                f"must be above the {which} zero fz{order_z[k] + 1} = {format_value(z, 'Hz')}",
                reasons=(
                    (
                        "each branch of a Type III network makes a pole above its zero: the lower pole must "
                        "lie above the lower zero and the upper pole above the upper zero"
                    ),
                    "move the poles up or the zeros down",
                ),
            )
    if pa > zb:
        return (za, pb), (zb, pa)
    return (za, pa), (zb, pb)


def synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx, fixed) -> dict:
    """Exact parts for two zeros, two poles and ``|H(j 2 pi fc)| = gain_at_fc``.

    Parameters
    ----------
    fc_hz : float
        Crossover frequency, Hz.
    gain_at_fc : float
        Required magnitude ``|H(j 2 pi fc)|``, V/V.
    zeros_hz, poles_hz : sequence of two floats
        ``(fz1, fz2)`` and ``(fp1, fp2)``, Hz, any order; see
        :func:`pairing` for the branch each is given to.
    ctx : NetworkContext
    fixed : dict
        Must hold ``R1`` (ohm); other entries are not used (with R1 fixed the
        placement determines every other part).

    Returns
    -------
    dict
        ``R1, R2, R3, C1, C2, C3`` and ``Rb`` (when the sensed voltage is above vref).

    Raises
    ------
    InfeasibleDesign
        No pairing puts each pole above its zero.
    """
    fc, g = check_targets(NAME, fc_hz, gain_at_fc)
    (fz_f, fp_f), (fz_i, fp_i) = pairing(zeros_hz, poles_hz)
    r1 = fixed_r1(NAME, fixed)
    c3 = (1.0 / fz_i - 1.0 / fp_i) / (TWO_PI * r1)
    r3 = r1 / (fp_i / fz_i - 1.0)
    lift = math.prod(math.sqrt(1.0 + (fc / z) ** 2) for z in (fz_f, fz_i))
    droop = math.prod(math.sqrt(1.0 + (fc / p) ** 2) for p in (fp_f, fp_i))
    c_sum = lift / (TWO_PI * fc * r1 * g * droop)
    c2 = c_sum * fz_f / fp_f
    c1 = c_sum * (1.0 - fz_f / fp_f)
    r2 = 1.0 / (TWO_PI * fz_f * c1)
    return {"R1": r1, **divider_parts(r1, ctx), "R2": r2, "R3": r3, "C1": c1, "C2": c2, "C3": c3}


def netlist(parts: dict, ctx, title: str) -> str:
    """ngspice deck: AC source at ``in``, error-amplifier output at ``out``."""
    p = check_parts(parts, _AC_PARTS, NAME)
    full = {**p, **({"Rb": parts["Rb"]} if "Rb" in parts else {})}
    return inverting_netlist(
        [
            f"R1 in inv {sn(p['R1'])}",
            f"R3 in nr3 {sn(p['R3'])}",
            f"C3 nr3 inv {sn(p['C3'])}",
            f"R2 inv nr2 {sn(p['R2'])}",
            f"C1 nr2 out {sn(p['C1'])}",
            f"C2 inv out {sn(p['C2'])}",
        ],
        full,
        ctx,
        title,
        comments=["Type III: R1 input with R3 in series with C3 across it; R2 in series with C1, C2 across both"],
    )


gain_need, gain_shortfall = gain_checks(inverting_network, poles_zeros)


def draw(sheet, ctx) -> None:
    """Draw the network on a :mod:`loopkit.schematic` sheet (its parts and values are the sheet's)."""
    from ..schematic import draw_opamp_network

    draw_opamp_network(sheet, NAME, ctx)
