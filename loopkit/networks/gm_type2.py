"""Type II compensator around a transconductance (gm) error amplifier.

Circuit (designators as in :data:`DESIGNATORS`)::

    in --R1--+-- fb (inverting input of the gm amplifier; + input at vref)
             |
             Rb
             |
            gnd          out --+-----------+---------+
                               |           |         |
                               Rc         Chf        Ro (the amplifier's own
                               |           |         |   output resistance)
                               Cc          |         |
                               |           |         |
                              gnd         gnd       gnd

The amplifier's inverting input draws no current, so the divider R1/Rb is
unloaded and its ratio ``Hdiv = Rb / (R1 + Rb)`` multiplies the transfer
(unlike the op-amp networks, where only R1 matters).  The amplifier drives the
current ``gm (vref - v_fb)`` into the impedance at ``out``::

    Gc(s) = V(out)/V(in) = -Hdiv gm [(Rc + 1/(s Cc)) || 1/(s Chf) || Ro]

With an ideal amplifier (``Ro`` infinite: ``ctx.opamp.r_out == 0``) this is an
integrator with the zero ``1/(2 pi Rc Cc)`` and the pole
``(Cc + Chf)/(2 pi Rc Cc Chf)``; a finite ``Ro`` turns the integrator into a pole
near ``1/(2 pi Ro (Cc + Chf))`` (about ``1/(2 pi Ro Cc)`` for ``Chf << Cc``).
"""

from __future__ import annotations

import math

from ..errors import DesignError, InfeasibleDesign
from ..rational import TWO_PI, Rational
from ..units import format_value
from . import NetworkContext
from .spice import ac_deck, spice_number

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
    "divider_bottom",
    "draw",
    "netlist",
    "part_value",
    "poles_zeros",
    "synthesise",
    "transfer",
    "type2_inputs",
]

#: Parts the transfer function needs.  The divider's bottom resistor ``Rb``
#: (``R1 vref / (v_sensed - vref)``) is returned by :func:`synthesise` whenever the
#: sensed voltage is above vref; a part list without it gets it from R1 and the
#: context.  It is absent when the sensed voltage equals vref (no divider).
#: The network's identity: design-file name, titles, amplifier kind and phase-boost limits (deg; one
#: zero-pole pair tends to 90 deg as K grows, two pairs to 180; the practical limits, beyond which the
#: parts spread over many decades, are common practice, no source).
NAME = "gm-type2"
TITLE = "Type II, transconductance amplifier"
SHORT_TITLE = "Type II"
AMPLIFIER = "transconductance"
HARD_BOOST_DEG = 90.0
PRACTICAL_BOOST_DEG = 75.0
OPTIONAL_DESIGNATORS = ("Rb",)
DESIGNATORS = ("R1", "Rc", "Cc", "Chf")
ZEROS = 1
POLES = 1


def type2_inputs(name: str, fc_hz, gain_at_fc, zeros_hz, poles_hz, fixed: dict) -> tuple[float, float, float]:
    """Check the synthesis inputs of a one-zero, one-pole network: (fz, fp, R1).

    Shared by the gm and optocoupler Type II networks.
    """
    if len(zeros_hz) != 1 or len(poles_hz) != 1:
        raise InfeasibleDesign("compensator.placement", (tuple(zeros_hz), tuple(poles_hz)),
                               f"{name} places exactly one zero and one pole")
    fz, fp = float(zeros_hz[0]), float(poles_hz[0])
    if not (fc_hz > 0 and gain_at_fc > 0 and math.isfinite(gain_at_fc)):
        raise InfeasibleDesign("compensator.fc", (fc_hz, gain_at_fc), "crossover and gain at crossover must be > 0")
    if not (0 < fz < fp < math.inf):
        raise InfeasibleDesign(
            "compensator.placement", f"fz = {format_value(fz, 'Hz')}, fp = {format_value(fp, 'Hz')}",
            "the zero must be above 0 and below the pole",
            reasons=("a Type II gives phase boost only with its zero below its pole",),
        )
    if "R1" not in fixed:
        raise DesignError("compensator.parts.R1", "missing", "synthesis needs the divider's top resistor R1 fixed")
    r1 = float(fixed["R1"])
    if not (r1 > 0):
        raise DesignError("compensator.parts.R1", r1, "must be > 0")
    return fz, fp, r1


def divider_bottom(r1: float, ctx: NetworkContext) -> float:
    """Bottom divider resistor ``Rb = R1 vref / (v_sensed - vref)``, ohm.

    Returns ``inf`` (no bottom resistor: ``Hdiv = 1``) when the sensed voltage
    equals the reference, e.g. behind a differential amplifier.

    Raises
    ------
    DesignError
        When the sensed voltage is below the reference (no divider can do it).
    """
    if not (ctx.vref > 0 and ctx.v_sensed >= ctx.vref * (1 - 1e-9)):
        raise DesignError(
            "sensing.reference",
            format_value(ctx.vref, "V"),
            f"must be > 0 and not above the sensed voltage {format_value(ctx.v_sensed, 'V')}",
        )
    if ctx.v_sensed - ctx.vref <= 1e-9 * ctx.vref:
        return math.inf
    return r1 * ctx.vref / (ctx.v_sensed - ctx.vref)


def _gm(ctx: NetworkContext) -> float:
    gm = ctx.opamp.gm
    if not (gm > 0):
        raise DesignError("compensator.opamp.gm", gm, "a gm-type2 network needs the amplifier's transconductance gm > 0 (S)")
    return gm


def part_value(parts: dict, name: str, network: str, needed: tuple, default: float | None = None) -> float:
    """One part's value (ohm or farad), checked; ``default`` when it may be left out."""
    if name not in parts:
        if default is not None:
            return default
        raise DesignError(f"compensator.parts.{name}", "missing", f"{network} needs {', '.join(needed)}")
    value = float(parts[name])
    if not (value > 0 and math.isfinite(value)):
        raise DesignError(f"compensator.parts.{name}", parts[name], "must be a finite value > 0")
    return value


def _part(parts: dict, name: str) -> float:
    return part_value(parts, name, "gm-type2", DESIGNATORS)


def _values(parts: dict, ctx: NetworkContext) -> tuple[float, float, float, float, float]:
    """(Hdiv, Rc, Cc, Chf, Ro) with Ro = inf for an ideal amplifier; Rb defaults to the dc divider."""
    r1 = _part(parts, "R1")
    rb = _rb(parts, r1, ctx)
    ro = ctx.opamp.r_out if ctx.opamp.r_out > 0 else math.inf
    return _hdiv(r1, rb), _part(parts, "Rc"), _part(parts, "Cc"), _part(parts, "Chf"), ro


def _rb(parts: dict, r1: float, ctx: NetworkContext) -> float:
    return _part(parts, "Rb") if "Rb" in parts else divider_bottom(r1, ctx)


def _hdiv(r1: float, rb: float) -> float:
    return 1.0 if math.isinf(rb) else rb / (r1 + rb)


def transfer(parts: dict, ctx: NetworkContext) -> Rational:
    """Signed transfer V(out)/V(in) of the gm Type II network, one corner.

    Parameters
    ----------
    parts : dict
        ``R1``, ``Rb`` (ohm; ``Rb`` defaults to ``R1 vref/(v_sensed - vref)``,
        none when the sensed voltage equals vref),
        ``Rc`` (ohm), ``Cc``, ``Chf`` (F).
    ctx : NetworkContext
        ``ctx.opamp.gm`` (S, required) and ``ctx.opamp.r_out`` (ohm, 0 = infinite).

    Returns
    -------
    Rational
        ``-Hdiv gm Ro (1 + s Rc Cc) / ((1 + s Ro Chf)(1 + s Rc Cc) + s Ro Cc)``,
        or its limit ``Ro -> inf``: ``-Hdiv gm (1 + s Rc Cc) / (s (Cc + Chf)(1 + s Rc Cc Chf/(Cc + Chf)))``.

    Notes
    -----
    Nodal analysis of the circuit in the module notes; the zero and pole agree
    with the transconductance Type II of the references in ``REFERENCES.md``
    (from memory).  The second-order denominator always has real roots, since
    ``(Ro Chf + Rc Cc + Ro Cc)^2 >= 4 Ro Chf Rc Cc``; they are computed with the
    cancellation-free quadratic formula.
    """
    hdiv, rc, cc, chf, ro = _values(parts, ctx)
    gm = _gm(ctx)
    zero = [(1.0, rc * cc)]
    if math.isinf(ro):
        ct = cc + chf
        return Rational.from_factors(-hdiv * gm / ct, zero, [(0.0, 1.0), (1.0, rc * cc * chf / ct)])
    c1 = ro * chf + rc * cc + ro * cc  # den = 1 + c1 s + c2 s^2 = (1 + t1 s)(1 + t2 s)
    c2 = ro * rc * cc * chf
    t1 = 0.5 * (c1 + math.sqrt(max(c1 * c1 - 4.0 * c2, 0.0)))
    t2 = c2 / t1
    return Rational.from_factors(-hdiv * gm * ro, zero, [(1.0, t1), (1.0, t2)])


def poles_zeros(parts: dict, ctx: NetworkContext) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Zero and poles (Hz) of the ideal-amplifier network (``Ro`` infinite).

    Returns
    -------
    zeros_hz, poles_hz : tuple
        ``(1/(2 pi Rc Cc),)`` and ``(0, (Cc + Chf)/(2 pi Rc Cc Chf))``; 0 is the integrator.
    """
    _, rc, cc, chf, _ = _values(parts, ctx)
    return (1.0 / (TWO_PI * rc * cc),), (0.0, (cc + chf) / (TWO_PI * rc * cc * chf))


def synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx: NetworkContext, fixed: dict) -> dict:
    """Parts for a zero, a pole and a gain at crossover.

    Parameters
    ----------
    fc_hz : float
        Crossover frequency, Hz.
    gain_at_fc : float
        Wanted ``|Gc(j 2 pi fc)|`` (ratio, not dB).
    zeros_hz, poles_hz : sequence of one float
        Zero and (non-origin) pole of the ideal-amplifier network, Hz, zero below pole.
    ctx : NetworkContext
        Amplifier gm and Ro, reference and sensed voltage.
    fixed : dict
        Must hold ``R1`` (ohm); ``Rb`` is always ``R1 vref/(v_sensed - vref)``
        (left out when the sensed voltage equals vref).

    Returns
    -------
    dict
        ``R1``, ``Rb`` (when there is a divider), ``Rc``, ``Cc``, ``Chf`` (ohm, F).

    Notes
    -----
    With ``Ct = Cc + Chf``: ``Chf = Ct fz/fp``, ``Cc = Ct - Chf``, ``Rc = 1/(2 pi fz Cc)``
    place the zero and pole of the ideal network exactly.  All three then scale
    with one factor ``k`` (``Cc, Chf`` times ``k``, ``Rc`` divided by ``k``) that
    moves neither root; the admittance at ``out`` is ``1/Ro + k Y0(j wc)`` with
    ``Re Y0 >= 0``, so ``|Gc(j wc)|`` falls monotonically with ``k`` and the ``k``
    that gives ``gain_at_fc`` with the finite ``Ro`` included solves a quadratic.
    It exists when ``gain_at_fc < Hdiv gm Ro``, the amplifier's dc gain.

    Raises
    ------
    InfeasibleDesign
        Zero not below the pole, non-positive frequencies, or more gain at fc than
        the amplifier's dc gain.
    """
    fz, fp, r1 = type2_inputs("gm-type2", fc_hz, gain_at_fc, zeros_hz, poles_hz, fixed)
    rb = divider_bottom(r1, ctx)
    hdiv = _hdiv(r1, rb)
    gm = _gm(ctx)
    ro = ctx.opamp.r_out if ctx.opamp.r_out > 0 else math.inf
    if gain_at_fc >= hdiv * gm * ro:
        dc_db = 20 * math.log10(hdiv * gm * ro)
        raise InfeasibleDesign(
            "compensator.opamp.r_out", format_value(ro, "Ω"),
            f"the amplifier's dc gain Hdiv gm Ro = {dc_db:.1f} dB is below the "
            f"{20 * math.log10(gain_at_fc):.1f} dB needed at fc",
            reasons=("use an amplifier with more gm or Ro, a lower crossover, or more output capacitance",),
        )
    wc, wz = TWO_PI * fc_hz, TWO_PI * fz
    # unit design, Ct = 1 F: Y0 = j wc Chf + j wc Cc / (1 + j wc Rc Cc)
    chf0 = fz / fp
    cc0 = 1.0 - chf0
    rc0 = 1.0 / (wz * cc0)
    y0 = 1j * wc * chf0 + 1j * wc * cc0 / (1.0 + 1j * wc * rc0 * cc0)
    a, b = y0.real, y0.imag
    g = 0.0 if math.isinf(ro) else 1.0 / ro
    y_target = hdiv * gm / gain_at_fc  # |1/Ro + k Y0| must equal this
    mag2 = a * a + b * b
    k = (-a * g + math.sqrt(a * a * g * g - mag2 * (g * g - y_target * y_target))) / mag2
    parts = {"R1": r1, "Rb": rb, "Rc": rc0 / k, "Cc": cc0 * k, "Chf": chf0 * k}
    if math.isinf(rb):
        del parts["Rb"]
    return parts


def netlist(parts: dict, ctx: NetworkContext, title: str = "gm-type2 compensator") -> str:
    """ngspice deck: AC 1 V at node ``in``, the network's output at node ``out``.

    The amplifier is a voltage-controlled current source ``gm (V(vref) - V(fb))``
    into ``out``, with ``Ro`` from ``out`` to ground.  An ideal amplifier
    (``r_out = 0``) gets ``Ro = 1e15`` ohm so the operating point exists; that
    moves the response by less than 1e-6 dB above 1 Hz for capacitors above 1 pF.
    """
    _, rc, cc, chf, ro = _values(parts, ctx)
    gm = _gm(ctx)
    r1 = _part(parts, "R1")
    rb = _rb(parts, r1, ctx)
    ro_deck = 1e15 if math.isinf(ro) else ro
    elements = [
        f"Vref vref 0 DC {spice_number(ctx.vref)}",
        f"R1 in fb {spice_number(r1)}",
        *([] if math.isinf(rb) else [f"Rb fb 0 {spice_number(rb)}"]),
        f"Gea out 0 fb vref {spice_number(gm)}",
        f"Ro out 0 {spice_number(ro_deck)}",
        f"Rc out nc {spice_number(rc)}",
        f"Cc nc 0 {spice_number(cc)}",
        f"Chf out 0 {spice_number(chf)}",
    ]
    comments = [
        "gm-type2: transconductance amplifier, current gm (V(vref) - V(fb)) into out",
        "Ro = " + ("1e15 ohm standing in for an ideal amplifier" if math.isinf(ro) else "its output resistance"),
    ]
    return ac_deck(title, elements, v_in_dc=ctx.v_sensed, comments=comments)


def draw(sheet, ctx) -> None:
    """Draw the network on a :mod:`loopkit.schematic` sheet (its parts and values are the sheet's)."""
    from ..schematic import draw_gm_network

    draw_gm_network(sheet, ctx)
