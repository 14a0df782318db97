"""DC bias of the shunt-regulator-and-optocoupler network: can the built parts hold the loop's operating point?

The small-signal model of :mod:`loopkit.networks.opto_type2` is linear and never
asks whether its dc operating point exists.  It must: the controller's feedback
pin sits at its operating voltage ``V_pin`` only if the phototransistor sinks the
pull-up's current, and the LED current that takes has to pass through ``R_LED``
while the shunt regulator's cathode stays above its least working voltage.

With the LED fed from the sensed output ``V_out`` (as the network's circuit is
drawn; ``ctx.v_sensed``)::

    I_C   = (V_pullup - V_pin) / R_pull          collector current
    I_LED = I_C / CTR                            LED current
    V_k   = V_out - V_F - I_LED R_LED            shunt cathode

and it biases when ``V_k >= V_k,min``.  Equivalently ``R_LED <= (V_out - V_F -
V_k,min) CTR R_pull / (V_pullup - V_pin)``, or ``R_pull >= (V_pullup - V_pin)
R_LED / (CTR (V_out - V_F - V_k,min))``: the fast lane's gain ``CTR R_pull /
R_LED`` has a floor ``(V_pullup - V_pin) / (V_out - V_F - V_k,min)`` that does
not depend on CTR or R_pull.  When the shunt cannot pull its cathode lower, the
LED current stops at ``(V_out - V_F - V_k,min) / R_LED`` and the pin rises above
its operating voltage to ``V_pullup - CTR I_LED R_pull``: the loop saturates.

This bias limit of the TL431-and-optocoupler circuit is discussed in C. Basso,
*Designing Control Loops for Linear and Switching Power Supplies*, Artech House
2012, chapter on the TL431 with an optocoupler (from memory: not verified
against the book).  The relations themselves are Kirchhoff's and Ohm's laws and
are checked against an ngspice dc operating point in tests/test_opto_bias.py.

The four voltages are optional keys of ``[compensator.opto]`` (:data:`BIAS_KEYS`)
with defaults :data:`BIAS_DEFAULTS`: a 5 V pull-up supply, a 2.5 V pin, a 1.0 V
LED and a 2.5 V shunt (the TL431 class's reference) -- common practice, no
source; give the values of your parts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import DesignError, Finding
from ..units import format_value

__all__ = ["BIAS_DEFAULTS", "BIAS_KEYS", "OptoBias", "bias_finding", "bias_point", "bias_values"]

#: Optional keys of ``[compensator.opto]`` for the dc bias, all in volts.
BIAS_KEYS = {"v_pullup": "V", "v_pin": "V", "v_led": "V", "v_shunt_min": "V"}

#: Their defaults (common practice, no source): a 5 V pull-up supply, a controller feedback pin
#: working at 2.5 V, an LED's forward voltage of 1.0 V and a TL431-class shunt whose cathode must
#: stay at or above its 2.5 V reference.
BIAS_DEFAULTS = {"v_pullup": 5.0, "v_pin": 2.5, "v_led": 1.0, "v_shunt_min": 2.5}

_WHAT = {
    "v_pullup": "the pull-up supply",
    "v_pin": "the controller pin's operating voltage",
    "v_led": "the LED's forward voltage",
    "v_shunt_min": "the shunt regulator's least cathode voltage",
}


def bias_values(opto: dict) -> dict:
    """The four bias voltages of ``opto`` (``ctx.opto``), defaults filled in, validated.

    Raises
    ------
    DesignError
        A value not finite or not positive, or a pin voltage at or above the pull-up supply.
    """
    out = {}
    for key, default in BIAS_DEFAULTS.items():
        v = float(opto.get(key, default))
        if not (math.isfinite(v) and v > 0):
            raise DesignError(f"compensator.opto.{key}", format_value(v, "V"), f"{_WHAT[key]}: must be > 0")
        out[key] = v
    if out["v_pin"] >= out["v_pullup"]:
        raise DesignError("compensator.opto.v_pin", format_value(out["v_pin"], "V"),
                          f"must be below the pull-up supply compensator.opto.v_pullup = "
                          f"{format_value(out['v_pullup'], 'V')}: the pull-up cannot raise the pin above it")
    return out


@dataclass(frozen=True)
class OptoBias:
    """The dc operating point of the optocoupler path (see the module notes).

    Attributes
    ----------
    i_c_a, i_led_a : float
        Collector current that holds the pin at ``v_pin`` and the LED current it takes, A.
    v_k_v : float
        Shunt cathode voltage that LED current needs, V.
    v_k_min_v : float
        The shunt's least cathode voltage, V.
    headroom_v : float
        ``V_out - V_F - V_k,min``: the most the LED resistor may drop, V.
    r_led_max_ohm : float
        Largest R_LED that biases (0 when the headroom is not positive).
    r_pull_min_ohm : float
        Least R_pull that biases (inf when the headroom is not positive).
    k_fast_min : float
        The fast lane's least gain ``(V_pullup - V_pin) / headroom`` (inf when not positive).
    v_pin_reached_v : float
        The pin voltage the circuit actually reaches (``v_pin`` when it biases, higher when
        the cathode stops at ``V_k,min``; the pull-up supply when there is no headroom at all).
    """

    i_c_a: float
    i_led_a: float
    v_k_v: float
    v_k_min_v: float
    headroom_v: float
    r_led_max_ohm: float
    r_pull_min_ohm: float
    k_fast_min: float
    v_pin_reached_v: float

    @property
    def ok(self) -> bool:
        """The cathode stays at or above the shunt's least voltage."""
        return self.v_k_v >= self.v_k_min_v


def bias_point(ctr: float, r_pull_ohm: float, r_led_ohm: float, v_out_v: float, bias: dict) -> OptoBias:
    """The dc operating point for CTR, R_pull, R_LED, the sensed output and :func:`bias_values`.

    Notes
    -----
    ``I_C = (V_pullup - V_pin)/R_pull``, ``I_LED = I_C/CTR``, ``V_k = V_out - V_F - I_LED R_LED``;
    the relation and its limit as in C. Basso, *Designing Control Loops for Linear and
    Switching Power Supplies*, Artech House 2012, TL431-with-optocoupler chapter (from memory).
    """
    dv_pull = bias["v_pullup"] - bias["v_pin"]
    i_c = dv_pull / r_pull_ohm
    i_led = i_c / ctr
    v_k = v_out_v - bias["v_led"] - i_led * r_led_ohm
    headroom = v_out_v - bias["v_led"] - bias["v_shunt_min"]
    if headroom > 0:
        r_led_max = headroom * ctr * r_pull_ohm / dv_pull
        r_pull_min = dv_pull * r_led_ohm / (ctr * headroom)
        k_min = dv_pull / headroom
        i_led_reached = min(i_led, headroom / r_led_ohm)
        v_pin_reached = bias["v_pullup"] - ctr * i_led_reached * r_pull_ohm
    else:
        r_led_max, r_pull_min, k_min, v_pin_reached = 0.0, math.inf, math.inf, bias["v_pullup"]
    return OptoBias(i_c, i_led, v_k, bias["v_shunt_min"], headroom, r_led_max, r_pull_min, k_min, v_pin_reached)


def bias_finding(b: OptoBias, ctr: float, r_pull_ohm: float, r_led_ohm: float, v_out_v: float,
                 k_mid: float | None = None) -> Finding | None:
    """A finding of severity "error" when the parts cannot bias, else None.

    Parameters
    ----------
    b : OptoBias
    ctr, r_pull_ohm, r_led_ohm, v_out_v : float
        The parts and the sensed output the point was computed for.
    k_mid : float, optional
        The network's mid-band gain (the crossover's need): R_LED must also stay above
        ``CTR R_pull / k_mid`` for the synthesis (the zero resistor only adds gain); when
        that floor meets the bias ceiling the message says no R_LED can do both.
    """
    if b.ok:
        return None
    if b.headroom_v <= 0:
        return Finding("opto-bias", (
            f"the optocoupler path cannot bias: the output {format_value(v_out_v, 'V')} does not cover the LED's "
            f"forward voltage and the shunt's least cathode voltage ({format_value(v_out_v - b.headroom_v, 'V')}"
            " together); feed the LED from a higher supply or use a lower-voltage shunt "
            "(compensator.opto.v_led, compensator.opto.v_shunt_min)"), None, "error")
    text = (f"the optocoupler path cannot bias: to hold the controller pin at its operating voltage the "
            f"collector needs {format_value(b.i_c_a, 'A')}, the LED {format_value(b.i_led_a, 'A')} (CTR {ctr:g}), "
            f"which drops {format_value(b.i_led_a * r_led_ohm, 'V')} across R_LED and would put the shunt's "
            f"cathode at {format_value(b.v_k_v, 'V')}, below its least {format_value(b.v_k_min_v, 'V')}; "
            f"the pin stops at {format_value(b.v_pin_reached_v, 'V')} and the loop saturates")
    r_led_floor = ctr * r_pull_ohm / k_mid if k_mid else 0.0
    if k_mid and r_led_floor >= b.r_led_max_ohm:
        text += (f". No R_LED does both: biasing needs R_LED <= {format_value(b.r_led_max_ohm, 'Ω')}, this "
                 f"crossover needs R_LED > {format_value(r_led_floor, 'Ω')} (fast-lane gain CTR Rpull/R_LED at least "
                 f"{20 * math.log10(b.k_fast_min):.1f} dB to bias, below the {20 * math.log10(k_mid):.1f} dB "
                 "mid-band gain the crossover needs): that crossover cannot be reached with this optocoupler and "
                 "pull-up; raise fc where the power stage has less gain, or lower the pull-up supply's headroom "
                 "(compensator.opto.v_pullup - v_pin), or a lower LED or shunt voltage; CTR and R_pull alone "
                 "do not help (the floor is (v_pullup - v_pin)/(vout - v_led - v_shunt_min))")
    else:
        window = f" (and above {format_value(r_led_floor, 'Ω')} for this crossover)" if k_mid else ""
        text += (f": set compensator.opto.r_led <= {format_value(b.r_led_max_ohm, 'Ω')}{window}, or "
                 f"compensator.opto.r_pull >= {format_value(b.r_pull_min_ohm, 'Ω')}, or a higher CTR "
                 "(compensator.opto.ctr)")
    return Finding("opto-bias", text, None, "error")
