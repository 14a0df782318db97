"""Type II for isolated supplies: shunt regulator plus optocoupler, LED fed from the output.

Circuit (designators as in :data:`DESIGNATORS`; ``R_LED``, ``Rpull``, CTR and the
optocoupler's own capacitance come from ``ctx.opto``)::

    in (converter output) --+------------------ R_LED --+
                            |                           |
                            R1                         LED (optocoupler)
                            |                           |
                            +-- ref ---[shunt]-- cathode k
                            |     \\                     |
                            Rb     +----Cz----Rz--------+
                            |
                           gnd

    (controller side)   Vdd --Rpull--+-- out (controller feedback pin)
                                     |
                         opto transistor, Cpole, c_opto to gnd

The shunt regulator (TL431-like) is an amplifier whose inverting input is its
reference pin and whose output is the cathode: ``V(k) = -A(s) V(ref)`` in small
signal (``A`` infinite for an ideal part, otherwise the finite gain/GBW of
``ctx.opamp``).  The LED current is ``(V(in) - V(k)) / R_LED``: the output
reaches the LED directly through ``R_LED`` (the "fast lane") besides through the
shunt's own integrator (the "slow lane").  The transistor sinks ``CTR`` times
the LED current from ``out`` against ``Rpull || 1/(s (Cpole + c_opto))``.
With an ideal shunt::

    V(out)/V(in) = -(CTR Rpull / R_LED) (1 + s (R1 + Rz) Cz) / (s R1 Cz)
                   / (1 + s Rpull (Cpole + c_opto))

so the zero is ``1/(2 pi (R1 + Rz) Cz)``, the pole ``1/(2 pi Rpull (Cpole + c_opto))``
and the mid-band gain (between zero and pole) ``(CTR Rpull / R_LED)(1 + Rz/R1)``.
With ``Rz = 0`` this is the form in C. Basso, *Designing Control Loops for Linear
and Switching Power Supplies*, Artech House 2012 (from memory): the fast lane
alone sets the mid-band gain ``CTR Rpull / R_LED``, so that is the *least*
mid-band gain the network can have.  A zero resistor ``Rz`` in series with
``Cz`` (our choice, documented here) adds gain through the slow lane, which lets
:func:`synthesise` meet any gain above that floor with the designer's ``R_LED``
unchanged (``R_LED`` is set by the LED and shunt bias currents, so lowering it
is left to the designer).  ``Rz`` may be left out of ``parts`` (a short).

The model is linear; whether its dc operating point exists is checked by
:func:`bias` (:mod:`loopkit.networks.opto_bias`): holding the pin at its
operating voltage puts a floor ``(V_pullup - V_pin)/(|vout| - V_F - V_k,min)``
under the fast lane's gain ``CTR Rpull/R_LED``, so R_LED has a ceiling beside
the synthesis's floor above.  :func:`bias_findings` reports a design that
cannot bias; :func:`synthesise` says when floor and ceiling cross.

The LED is taken as ideal (no dynamic resistance; add it to ``r_led`` if it
matters) and the optocoupler's own pole as ``Rpull`` against ``c_opto``; CTR
varies strongly with part, temperature and age, so check the loop at its
extremes.
"""

from __future__ import annotations

import math

import numpy.polynomial.polynomial as npoly

from ..errors import DesignError, InfeasibleDesign
from ..rational import TWO_PI, Rational
from ..units import format_value
from . import NetworkContext
from .gm_type2 import divider_bottom, part_value, type2_inputs
from .opto_bias import BIAS_KEYS, OptoBias, bias_finding, bias_point, bias_values
from .spice import OPAMP_SUBCKT, ac_deck, opamp_subcircuit, spice_number

__all__ = [
    "AMPLIFIER",
    "DESIGNATORS",
    "HARD_BOOST_DEG",
    "NAME",
    "OPTIONAL_DESIGNATORS",
    "OPTO_KEYS",
    "POLES",
    "PRACTICAL_BOOST_DEG",
    "REQUIRED_OPTO_KEYS",
    "SHORT_TITLE",
    "TITLE",
    "ZEROS",
    "bias",
    "bias_findings",
    "draw",
    "netlist",
    "poles_zeros",
    "synthesise",
    "transfer",
]

#: Parts the transfer function needs.  ``Rb`` (divider bottom, ``R1 vref /
#: (v_sensed - vref)``; it matters only with a finite-gain shunt) and ``Rz`` (zero
#: resistor; absent = a short) are returned by :func:`synthesise` but may be left
#: out of a part list: ``Rb`` is then computed from R1 and the context.
#: The network's identity: design-file name, titles, amplifier kind and phase-boost limits (deg; one
#: zero-pole pair tends to 90 deg as K grows, two pairs to 180; the practical limits, beyond which the
#: parts spread over many decades, are common practice, no source).
NAME = "opto-type2"
TITLE = "Type II, shunt reference and optocoupler"
SHORT_TITLE = "Type II"
AMPLIFIER = "optocoupler"
HARD_BOOST_DEG = 90.0
PRACTICAL_BOOST_DEG = 75.0
OPTIONAL_DESIGNATORS = ("Rb", "Rz")
DESIGNATORS = ("R1", "Cz", "Cpole")
ZEROS = 1
POLES = 1

#: Keys of ``ctx.opto`` the small-signal model needs, and their units.
REQUIRED_OPTO_KEYS = {"ctr": "", "r_pull": "Ω", "r_led": "Ω", "c_opto": "F"}

#: Keys of ``ctx.opto`` (the design file's ``[compensator.opto]``) and their units: the required ones
#: and the optional dc-bias voltages of :mod:`loopkit.networks.opto_bias` (defaults there).
OPTO_KEYS = {**REQUIRED_OPTO_KEYS, **BIAS_KEYS}


def _opto(ctx: NetworkContext) -> tuple[float, float, float, float]:
    """(ctr, r_pull, r_led, c_opto), validated."""
    values = []
    for key, unit in REQUIRED_OPTO_KEYS.items():
        field = f"compensator.opto.{key}"
        if key not in ctx.opto:
            hint = " (0 to neglect the optocoupler's pole)" if key == "c_opto" else ""
            raise DesignError(field, "missing", f"opto-type2 needs {', '.join(REQUIRED_OPTO_KEYS)}{hint}")
        v = float(ctx.opto[key])
        ok = v >= 0 if key == "c_opto" else v > 0
        if not (ok and math.isfinite(v)):
            raise DesignError(field, format_value(v, unit), "must be >= 0" if key == "c_opto" else "must be > 0")
        values.append(v)
    return tuple(values)


def bias(ctx: NetworkContext) -> OptoBias:
    """The dc operating point of the optocoupler path (:func:`loopkit.networks.opto_bias.bias_point`).

    The LED is fed from the network's input, ``ctx.v_sensed`` (the output, with divider sensing).
    """
    ctr, r_pull, r_led, _ = _opto(ctx)
    return bias_point(ctr, r_pull, r_led, ctx.v_sensed, bias_values(ctx.opto))


def bias_findings(parts: dict, ctx: NetworkContext) -> list:
    """A finding of severity "error" when the parts cannot bias (:func:`bias`), naming what to change.

    ``parts`` gives the mid-band gain ``(CTR Rpull/R_LED)(1 + Rz/R1)``, so the message can say
    when no R_LED both biases and reaches the crossover.
    """
    ctr, r_pull, r_led, _ = _opto(ctx)
    k_mid = ctr * r_pull / r_led * (1.0 + _part(parts, "Rz", 0.0) / _part(parts, "R1"))
    found = bias_finding(bias(ctx), ctr, r_pull, r_led, ctx.v_sensed, k_mid)
    return [] if found is None else [found]


def _part(parts: dict, name: str, default: float | None = None) -> float:
    return part_value(parts, name, "opto-type2", DESIGNATORS, default)


def _values(parts: dict, ctx: NetworkContext) -> tuple[float, float, float, float, float]:
    """(R1, Rb, Rz, Cz, Cpole); Rb defaults to the dc divider, Rz to 0 (a short)."""
    r1 = _part(parts, "R1")
    rb = _part(parts, "Rb") if "Rb" in parts else divider_bottom(r1, ctx)
    return r1, rb, _part(parts, "Rz", 0.0), _part(parts, "Cz"), _part(parts, "Cpole")


def _amplifier_polys(ctx: NetworkContext) -> tuple[list, list] | None:
    """``A(s) = na/da`` (ascending coefficients) of the shunt's amplifier, None if ideal.

    The model of :func:`loopkit.networks.spice.opamp_subcircuit`:
    ``A0 / (1 + s A0/(2 pi GBW))``, ``A0`` alone, or ``2 pi GBW / s``.
    """
    op = ctx.opamp
    if op.ideal:
        return None
    a0 = 10.0 ** (op.gain_db / 20.0) if op.gain_db > 0 else None
    w_gbw = TWO_PI * op.gbw if op.gbw > 0 else None
    if w_gbw is None:
        return [a0], [1.0]
    if a0 is None:
        return [w_gbw], [0.0, 1.0]
    return [a0], [1.0, a0 / w_gbw]


def transfer(parts: dict, ctx: NetworkContext) -> Rational:
    """Signed transfer V(out)/V(in): controller pin over converter output, one corner.

    Parameters
    ----------
    parts : dict
        ``R1``, ``Rb`` (ohm; ``Rb`` defaults to ``R1 vref/(v_sensed - vref)``),
        ``Rz`` (ohm, optional, default 0), ``Cz``, ``Cpole`` (F).
    ctx : NetworkContext
        ``ctx.opto`` gives ``ctr``, ``r_pull``, ``r_led``, ``c_opto``;
        ``ctx.opamp`` the shunt amplifier's gain/GBW (0 = ideal).

    Returns
    -------
    Rational
        Negative at low frequency (output up, pin down).  Ideal shunt: the
        formula in the module notes.  Finite ``A = na/da``, with
        ``Yz = s Cz/(1 + s Rz Cz)``, ``G1 = 1/R1``, ``Gb = 1/Rb``::

            D = (G1 + Gb) dz da + nz (da + na),  (Yz = nz/dz)
            V(out)/V(in) = -(CTR Rpull/R_LED) (D + G1 na dz) / D / (1 + s Rpull Ct)

    Notes
    -----
    Nodal analysis of the reference pin ``(V(in) - V(ref)) G1 + (V(k) - V(ref)) Yz
    - V(ref) Gb = 0`` with ``V(k) = -A V(ref)``, then
    ``V(out) = -CTR (V(in) - V(k))/R_LED * Rpull/(1 + s Rpull Ct)``.
    """
    r1, rb, rz, cz, cpole = _values(parts, ctx)
    ctr, r_pull, r_led, c_opto = _opto(ctx)
    k_mid = ctr * r_pull / r_led
    pole = (1.0, r_pull * (cpole + c_opto))
    amp = _amplifier_polys(ctx)
    if amp is None:
        return Rational.from_factors(-k_mid / (r1 * cz), [(1.0, (r1 + rz) * cz)], [(0.0, 1.0), pole])
    na, da = amp
    g1, gb = 1.0 / r1, 0.0 if math.isinf(rb) else 1.0 / rb
    nz, dz = [0.0, cz], [1.0, rz * cz]
    d = npoly.polyadd(npoly.polymul([g1 + gb], npoly.polymul(dz, da)), npoly.polymul(nz, npoly.polyadd(da, na)))
    n = npoly.polyadd(d, npoly.polymul([g1], npoly.polymul(na, dz)))
    return Rational.from_polys([-k_mid * n], [npoly.polymul(d, list(pole))])


def poles_zeros(parts: dict, ctx: NetworkContext) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Zero and poles (Hz) of the ideal-shunt network.

    Returns
    -------
    zeros_hz, poles_hz : tuple
        ``(1/(2 pi (R1 + Rz) Cz),)`` and ``(0, 1/(2 pi Rpull (Cpole + c_opto)))``.
    """
    r1, _, rz, cz, cpole = _values(parts, ctx)
    _, r_pull, _, c_opto = _opto(ctx)
    return (1.0 / (TWO_PI * (r1 + rz) * cz),), (0.0, 1.0 / (TWO_PI * r_pull * (cpole + c_opto)))


def synthesise(fc_hz, gain_at_fc, zeros_hz, poles_hz, ctx: NetworkContext, fixed: dict) -> dict:
    """Parts for a zero, a pole and a gain at crossover (ideal shunt amplifier).

    Parameters
    ----------
    fc_hz : float
        Crossover frequency, Hz.
    gain_at_fc : float
        Wanted ``|V(out)/V(in)|`` at ``fc`` (ratio).
    zeros_hz, poles_hz : sequence of one float
        Zero and (non-origin) pole, Hz, zero below pole.
    ctx : NetworkContext
        ``ctx.opto`` (CTR, Rpull, R_LED, c_opto), reference and sensed voltage.
    fixed : dict
        Must hold ``R1`` (ohm).

    Returns
    -------
    dict
        ``R1``, ``Rb`` (when there is a divider), ``Rz``, ``Cz``, ``Cpole`` (ohm, F).

    Notes
    -----
    ``Cpole = 1/(2 pi fp Rpull) - c_opto``.  The mid-band gain needed is
    ``Gmid = gain_at_fc (wc/wz) |1 + j wc/wp| / |1 + j wc/wz|``; the fast lane
    gives ``Kf = CTR Rpull/R_LED``, so ``Rz = R1 (Gmid/Kf - 1)`` and
    ``Cz = 1/(2 pi fz (R1 + Rz))``.

    Raises
    ------
    InfeasibleDesign
        When the optocoupler's own pole is already at or below the wanted pole
        (``Cpole`` would not be positive), or when the fast lane alone gives at
        least the gain needed (``Rz`` would not be positive); the message says
        what to change.
    """
    fz, fp, r1 = type2_inputs("opto-type2", fc_hz, gain_at_fc, zeros_hz, poles_hz, fixed)
    rb = divider_bottom(r1, ctx)
    ctr, r_pull, r_led, c_opto = _opto(ctx)

    c_total = 1.0 / (TWO_PI * fp * r_pull)
    cpole = c_total - c_opto
    if not (cpole > 0):
        f_opto = 1.0 / (TWO_PI * r_pull * c_opto)
        raise InfeasibleDesign(
            "compensator.opto.c_opto", format_value(c_opto, "F"),
            f"the optocoupler's own pole 1/(2 pi Rpull c_opto) = {format_value(f_opto, 'Hz')} is already at or "
            f"below the wanted pole {format_value(fp, 'Hz')}, so Cpole would be {format_value(cpole, 'F')}",
            reasons=(
                f"place the pole below {format_value(f_opto, 'Hz')} (lower crossover or less phase margin)",
                ("lower Rpull (compensator.opto.r_pull) to move the optocoupler's pole up; the mid-band gain "
                 "CTR Rpull/R_LED falls with it, so lower R_LED too"),
                "use an optocoupler with less collector capacitance (more bandwidth)",
            ),
        )

    wc, wz, wp = TWO_PI * fc_hz, TWO_PI * fz, TWO_PI * fp
    shape_at_fc = abs(1.0 + 1j * wc / wz) / (wc / wz) / abs(1.0 + 1j * wc / wp)
    g_mid = gain_at_fc / shape_at_fc
    k_fast = ctr * r_pull / r_led
    ratio = g_mid / k_fast
    if not (ratio > 1.0):
        r_led_needed = ctr * r_pull / g_mid
        point = bias(ctx)
        if point.headroom_v > 0 and not (point.k_fast_min < g_mid):  # the bias floor of the fast lane is above the gain needed too
            raise InfeasibleDesign(
                "compensator.fc", format_value(fc_hz, "Hz"),
                f"that crossover cannot be reached with this optocoupler and pull-up: it needs a mid-band gain of "
                f"{20 * math.log10(g_mid):.1f} dB, but the fast lane CTR Rpull/R_LED must give at least "
                f"{20 * math.log10(point.k_fast_min):.1f} dB for the shunt to bias (R_LED <= "
                f"{format_value(point.r_led_max_ohm, 'Ω')}: (v_pullup - v_pin)/(|vout| - v_led - v_shunt_min)"
                " sets that floor whatever CTR and Rpull are) and the zero resistor can only add gain",
                reasons=(
                    "raise fc where the power stage has less gain (the network then needs more mid-band gain)",
                    "or lower the pull-up's headroom compensator.opto.v_pullup - v_pin",
                    "or a lower LED or shunt voltage (compensator.opto.v_led, v_shunt_min)",
                ),
            )
        raise InfeasibleDesign(
            "compensator.opto.r_led", format_value(r_led, "Ω"),
            f"the fast lane through R_LED alone gives a mid-band gain CTR Rpull/R_LED = "
            f"{20 * math.log10(k_fast):.1f} dB (CTR {ctr:g}, Rpull {format_value(r_pull, 'Ω')}), more than the "
            f"{20 * math.log10(g_mid):.1f} dB this crossover needs; the zero resistor can only add gain",
            reasons=(
                (f"raise R_LED above {format_value(r_led_needed, 'Ω')} (it biases up to "
                 f"{format_value(point.r_led_max_ohm, 'Ω')})"),
                "or lower CTR x Rpull (optocoupler with lower CTR, smaller Rpull with a larger Cpole)",
                "or choose a crossover where the power stage has less gain",
            ),
        )
    rz = r1 * (ratio - 1.0)
    cz = 1.0 / (wz * (r1 + rz))
    parts = {"R1": r1, "Rb": rb, "Rz": rz, "Cz": cz, "Cpole": cpole}
    if math.isinf(rb):
        del parts["Rb"]
    return parts


def netlist(parts: dict, ctx: NetworkContext, title: str = "opto-type2 compensator") -> str:
    """ngspice deck: AC 1 V at node ``in`` (converter output), the controller pin at ``out``.

    The shunt regulator is the op-amp subcircuit (non-inverting input at the
    internal reference ``vref``, inverting input the reference pin ``fb``,
    output the cathode ``k``); the LED is a 0 V source ``Vled`` (an ammeter: an
    ideal LED in small signal); the phototransistor is a current-controlled
    current source of gain CTR sinking from ``out``.
    """
    r1, rb, rz, cz, cpole = _values(parts, ctx)
    ctr, r_pull, r_led, c_opto = _opto(ctx)
    elements = [
        f"Vref vref 0 DC {spice_number(ctx.vref)}",
        f"R1 in fb {spice_number(r1)}",
        *([] if math.isinf(rb) else [f"Rb fb 0 {spice_number(rb)}"]),
        f"XU1 vref fb k {OPAMP_SUBCKT}",
    ]
    if rz > 0:
        elements += [f"Rz k nz {spice_number(rz)}", f"Cz nz fb {spice_number(cz)}"]
    else:
        elements += [f"Cz k fb {spice_number(cz)}"]
    elements += [
        f"Rled in led_a {spice_number(r_led)}",
        "Vled led_a k DC 0",
        f"Fopto out 0 Vled {spice_number(ctr)}",
        f"Vdd vdd 0 DC {spice_number(bias_values(ctx.opto)['v_pullup'])}",
        f"Rpull vdd out {spice_number(r_pull)}",
        f"Cpole out 0 {spice_number(cpole)}",
    ]
    if c_opto > 0:
        elements.append(f"Copto out 0 {spice_number(c_opto)}")
    comments = [
        "opto-type2: shunt regulator (XU1) with Cz/Rz feedback; LED from the output through Rled;",
        "phototransistor = Fopto (CTR x LED current) pulling the controller pin 'out' against Rpull",
    ]
    return ac_deck(title, elements, v_in_dc=ctx.v_sensed, subcircuits=opamp_subcircuit(ctx.opamp), comments=comments)


def draw(sheet, ctx) -> None:
    """Draw the network on a :mod:`loopkit.schematic` sheet (its parts and values are the sheet's)."""
    from ..schematic import draw_opto_network

    draw_opto_network(sheet, ctx)
