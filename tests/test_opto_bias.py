"""The optocoupler network's dc bias (loopkit.networks.opto_bias) and its finding.

Sources of the checks:

- the bias relation ``V_k = V_out - V_F - (V_pullup - V_pin) R_LED / (CTR R_pull)`` and its limit
  ``V_k >= V_k,min``: C. Basso, *Designing Control Loops for Linear and Switching Power Supplies*,
  Artech House 2012, chapter on the TL431 with an optocoupler (from memory, not verified);
- checked against an ngspice dc operating point (ngspice 39, ``op``) of the real circuit: the LED a
  junction diode of the given forward voltage, the phototransistor a CCCS of gain CTR, the pull-up to
  its supply, and the shunt a behavioural source limited below at its least cathode voltage;
- the samples' targets through ``loopkit design`` (exit 0, no bias error).
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from loopkit import load_design
from loopkit.design import OpAmp
from loopkit.designfile import dumps_design, loads_design
from loopkit.errors import DesignError, InfeasibleDesign
from loopkit.loop import design_loop
from loopkit.networks import NetworkContext, opto_type2
from loopkit.networks.opto_bias import BIAS_DEFAULTS, bias_point, bias_values

OPTO = {"ctr": 0.5, "r_pull": 4.7e3, "r_led": 4.7e3, "c_opto": 470e-12}
SAMPLES = ("sample_designs/flyback_48v_12v.toml", "sample_designs/flyback_pcm_48v_12v.toml")

#: Thermal voltage kT/q at ngspice's default 27 degC, V (CODATA constants).
VT_27C = 1.380649e-23 * 300.15 / 1.602176634e-19
#: Emission coefficient of the LED diode; its saturation current puts the forward voltage at v_led at
#: 1 mA, and every case runs it within 10 % of 1 mA, so it drops v_led within N Vt ln 1.1 = 2.5 mV.
N_LED = 1.0


def ctx_for(v_out=12.0, **opto):
    return NetworkContext(opamp=OpAmp(), vref=2.5, v_sensed=v_out, opto={**OPTO, **opto})


# --------------------------------------------------------------------------- the relation
def test_bias_point_by_hand():
    """Ohm's and Kirchhoff's laws worked by hand for 12 V out, CTR 0.5, Rpull 4.7k, R_LED 4.7k."""
    b = opto_type2.bias(ctx_for())
    assert b.i_c_a == pytest.approx(2.5 / 4.7e3, rel=1e-12)  # (5 - 2.5) / 4.7k
    assert b.i_led_a == pytest.approx(2 * 2.5 / 4.7e3, rel=1e-12)  # / CTR 0.5
    assert b.v_k_v == pytest.approx(12 - 1 - 5.0, rel=1e-12)  # 1.064 mA x 4.7k = 5 V
    assert b.ok
    # the ceiling and floor: 8.5 V headroom x 0.5 x 4.7k / 2.5 V; 2.5 V x 4.7k / (0.5 x 8.5 V)
    assert b.r_led_max_ohm == pytest.approx(8.5 * 0.5 * 4.7e3 / 2.5, rel=1e-12)
    assert b.r_pull_min_ohm == pytest.approx(2.5 * 4.7e3 / (0.5 * 8.5), rel=1e-12)
    assert b.k_fast_min == pytest.approx(2.5 / 8.5, rel=1e-12)
    # at the ceiling the cathode sits exactly at its least voltage
    at = bias_point(0.5, 4.7e3, b.r_led_max_ohm, 12.0, bias_values({}))
    assert at.v_k_v == pytest.approx(2.5, abs=1e-9)


def test_defaults_and_bad_values():
    assert bias_values({}) == BIAS_DEFAULTS == {"v_pullup": 5.0, "v_pin": 2.5, "v_led": 1.0, "v_shunt_min": 2.5}
    for key in BIAS_DEFAULTS:
        with pytest.raises(DesignError) as err:
            bias_values({key: -1.0})
        assert err.value.field == f"compensator.opto.{key}"
    with pytest.raises(DesignError) as err:
        bias_values({"v_pullup": 3.3, "v_pin": 3.3})
    assert err.value.field == "compensator.opto.v_pin" and "v_pullup" in str(err.value)


# --------------------------------------------------------------------------- against ngspice
def _ngspice_op(ctr, r_pull, r_led, v_out, bias) -> dict:
    """(V(k), V(pin), I_LED) of the circuit's dc operating point from ngspice.

    At dc the converter's regulation (the shunt's integrator, infinite dc gain) holds the output,
    and the stage needs its pin at ``v_pin``: that closed loop's dc action is a behavioural source
    driving the cathode from the pin's error with a gain of 1e5, limited below at the shunt's least
    cathode voltage and above at the output (the shunt can only sink).
    """
    i_s = 1e-3 * math.exp(-bias["v_led"] / (N_LED * VT_27C))  # the LED drops v_led at 1 mA
    deck = "\n".join([
        "opto dc bias",
        f"Vout in 0 DC {v_out}",
        f"Rled in a {r_led}",
        "Dled a dk dled",
        f".model dled D(IS={i_s:.6e} N={N_LED})",
        "Vsense dk k DC 0",
        f"Bshunt k 0 V = max({bias['v_shunt_min']}, min({v_out}, {v_out / 2} - 1e5 * (v(pin) - {bias['v_pin']})))",
        f"Fopto pin 0 Vsense {ctr}",
        f"Vdd vdd 0 DC {bias['v_pullup']}",
        f"Rpull vdd pin {r_pull}",
        ".control",
        "op",
        "print v(k) v(pin) v(a) i(vsense)",
        ".endc",
        ".end",
        "",
    ])
    out = subprocess.run(["ngspice", "-b"], input=deck, capture_output=True, text=True, timeout=60, check=False).stdout
    values = dict(re.findall(r"^\s*(v\(\w+\)|i\(vsense\))\s*=\s*(\S+)", out, re.MULTILINE | re.IGNORECASE))
    assert len(values) == 4, out
    return {k.lower(): float(v) for k, v in values.items()}


needs_ngspice = pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice not installed")


@pytest.mark.ngspice
@needs_ngspice
@pytest.mark.parametrize("ctr, r_pull, r_led, v_out, change", [
    (0.5, 4.7e3, 4.7e3, 12.0, {}),  # the voltage-mode sample as built
    (0.5, 4.7e3, 3.3e3, 12.0, {}),  # the peak-current sample as built
    (1.0, 2.2e3, 1.5e3, 5.0, {"v_pullup": 3.3, "v_pin": 1.2, "v_led": 1.2, "v_shunt_min": 1.24}),
])
def test_biasing_circuit_agrees_with_ngspice(ctr, r_pull, r_led, v_out, change):
    bias = {**BIAS_DEFAULTS, **change}
    b = bias_point(ctr, r_pull, r_led, v_out, bias)
    assert b.ok
    sim = _ngspice_op(ctr, r_pull, r_led, v_out, bias)
    assert sim["v(pin)"] == pytest.approx(bias["v_pin"], abs=1e-3)  # the pin reaches its operating point
    assert sim["i(vsense)"] == pytest.approx(b.i_led_a, rel=1e-3)
    assert sim["v(a)"] - sim["v(k)"] == pytest.approx(bias["v_led"], abs=0.01)  # LED of the given V_F
    assert sim["v(k)"] == pytest.approx(b.v_k_v, abs=0.01)


@pytest.mark.ngspice
@needs_ngspice
@pytest.mark.parametrize("r_led", [22e3, 10e3])  # the two flyback samples' R_LED before this check
def test_non_biasing_circuit_pins_the_cathode_in_ngspice(r_led):
    bias = dict(BIAS_DEFAULTS)
    b = bias_point(0.5, 4.7e3, r_led, 12.0, bias)
    assert not b.ok
    sim = _ngspice_op(0.5, 4.7e3, r_led, 12.0, bias)
    assert sim["v(k)"] == pytest.approx(bias["v_shunt_min"], abs=1e-6)  # pinned at its lower limit
    assert sim["v(pin)"] > bias["v_pin"] + 0.4  # the pin cannot come down to its operating point
    assert sim["v(pin)"] == pytest.approx(b.v_pin_reached_v, abs=0.01)


# --------------------------------------------------------------------------- the finding and the synthesis
def test_finding_fires_on_the_old_sample_parts():
    design = load_design(SAMPLES[0])
    old = loads_design(dumps_design(design).replace('r_led = "4.7k"', 'r_led = "22k"')
                       .replace('r_led = 4700.0', 'r_led = 22000.0').replace('r_led = 4.7e3', 'r_led = 22e3'))
    assert old.compensator.opto["r_led"] == pytest.approx(22e3)
    result = design_loop(old)
    found = [f for f in result.findings if f.code == "opto-bias"]
    assert len(found) == 1 and found[0].severity == "error"
    msg = found[0].message
    for word in ("-12.4V", "1.06mA", "532µA", "7.99kΩ", "compensator.opto.r_led", "compensator.opto.r_pull"):
        assert word in msg, word
    assert not result.met


@pytest.mark.parametrize("path", SAMPLES)
def test_samples_bias_and_meet_their_targets(path):
    result = design_loop(load_design(path))
    assert result.met
    assert not [f for f in result.findings if f.code == "opto-bias"]
    assert opto_type2.bias(NetworkContext(vref=2.5, v_sensed=12.0, opto=result.design.compensator.opto)).v_k_v > 5.0


def test_synthesis_says_when_bias_and_crossover_conflict():
    """Needs 0.25 (-12 dB) mid-band gain; biasing needs the fast lane at >= 2.5/8.5 (-10.6 dB)."""
    fc, fz, fp = 2e3, 500.0, 8e3
    shape = abs(1 + 1j * fc / fz) / (fc / fz) / abs(1 + 1j * fc / fp)
    ctx = ctx_for(r_led=22e3)  # fast lane 0.107, below 0.25: the synthesis works but cannot bias
    parts = opto_type2.synthesise(fc, 0.25 * shape, [fz], [fp], ctx, {"R1": 47e3})
    assert opto_type2.bias_findings(parts, ctx)[0].message.count("No R_LED does both") == 1
    with pytest.raises(InfeasibleDesign) as err:  # R_LED lowered to bias: the fast lane alone is too much
        opto_type2.synthesise(fc, 0.25 * shape, [fz], [fp], ctx_for(r_led=7.9e3), {"R1": 47e3})
    assert err.value.field == "compensator.fc"
    assert "cannot be reached with this optocoupler and pull-up" in str(err.value)
    assert "-10.6 dB" in str(err.value) and "-12.0 dB" in str(err.value)
    # with a 3.3 V pull-up the floor drops to 0.8/8.5 (-19.0 dB): 15k (above 9.4k) biases and synthesises
    low = ctx_for(r_led=15e3, v_pullup=3.3)
    parts = opto_type2.synthesise(fc, 0.25 * shape, [fz], [fp], low, {"R1": 47e3})
    assert parts["Rz"] > 0 and opto_type2.bias(low).ok and not opto_type2.bias_findings(parts, low)


def test_deck_uses_the_pull_up_supply():
    parts = {"R1": 47e3, "Rz": 10e3, "Cz": 10e-9, "Cpole": 1e-9}
    assert "Vdd vdd 0 DC 3.3" in opto_type2.netlist(parts, ctx_for(v_pullup=3.3))
    assert "Vdd vdd 0 DC 5" in opto_type2.netlist(parts, ctx_for())


def test_new_keys_round_trip_through_the_design_file():
    text = Path(SAMPLES[1]).read_text().replace('c_opto = "470p"', 'c_opto = "470p"\nv_pullup = "3.3"\nv_pin = "1.2"'
                                           '\nv_led = "1.15"\nv_shunt_min = "1.24"')
    design = loads_design(text)
    opto = design.compensator.opto
    assert (opto["v_pullup"], opto["v_pin"], opto["v_led"], opto["v_shunt_min"]) == (3.3, 1.2, 1.15, 1.24)
    assert loads_design(dumps_design(design)) == design
    with pytest.raises(DesignError) as err:
        loads_design(text.replace('v_led = "1.15"', 'v_led = "40"'))
    assert err.value.field == "compensator.opto.v_led"
