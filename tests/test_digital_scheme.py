"""The digital control scheme: design fields, the sampled loop of a designed controller, CLI.

Outside references:
- tests/reference/sampled_sim.py: a literal time-domain simulation of the sampled loop (event-driven
  matrix exponentials of the averaged plant, the hold and the delay applied as they happen, the
  controller's difference equation run on the samples, single-bin DFTs), which never calls the code
  under test; it gives the loop gain by series injection (R. D. Middlebrook, "Measurement of loop gain
  in feedback systems", Int. J. Electronics 38(4), 1975; from memory) and the closed-loop step;
- python-control 0.10 ``sample_system`` (zoh; tustin with ``prewarp_frequency``) and
  ``stability_margins``; scipy.signal ``cont2discrete`` (zoh, bilinear);
- G. F. Franklin, J. D. Powell, M. L. Workman, Digital Control of Dynamic Systems, 3rd ed., 1998,
  ch. 4 and 6 (ZOH equivalent; Tustin prewarped at w1 equals the analog response at w1; from memory);
- L. Corradini, D. Maksimovic, P. Mattavelli, R. Zane, Digital Control of High-Frequency Switched-Mode
  Power Converters, 2015, ch. 3 (uniformly sampled modulators: trailing edge D Ts, leading edge
  D' Ts, symmetric Ts/2; from memory).
"""

import functools
import json
from dataclasses import replace

import numpy as np
import pytest
import scipy.signal as ss

import loopkit
from loopkit.cli import main
from loopkit.design import Digital
from loopkit.designfile import dumps_design, loads_design
from loopkit.digital_control import tustin
from loopkit.digital_design import analog_design
from loopkit.digital_loop import closed_loop_step
from loopkit.errors import DesignError
from loopkit.loop import LoopSession
from loopkit.rational import TWO_PI, Rational
from loopkit.sampled import sampled_plant
from loopkit.schemes.digital import loop_delay_s
from tests.reference.sampled_sim import loop_gain, simulate
from tests.reference.samples import assert_margins_equal_control, sample_design, sample_result

control = pytest.importorskip("control")

#: The digital samples, picked by name.
SAMPLES = ["inverting_mcu_minus12v", "buck_dsp_5v"]


_design, _result = sample_design, sample_result


def _desc(r: Rational, k: int):
    num, den = r.take(k).polys()
    return np.trim_zeros(num[0], "b")[::-1], np.trim_zeros(den[0], "b")[::-1]


# ---------------------------------------------------------------------------- design fields
def test_samples_round_trip_through_the_design_file():
    for name in SAMPLES:
        d = _design(name)
        assert d.control.scheme == "digital"
        assert loads_design(dumps_design(d)) == d


@pytest.mark.parametrize("table,field", [
    ('adc_bits = 3', "digital.adc_bits"),
    ('adc_bits = 10.5', "digital.adc_bits"),
    ('carrier = "sawtooth"', "digital.carrier"),
    ('form = "type2"', "digital.form"),
    ('method = "euler"', "digital.method"),
    ('update = "later"', "digital.update"),
    ('word_length = 16\nfrac_bits = 16', "digital.frac_bits"),
    ('pwm_clock = 0', "digital.pwm_clock"),           # the scheme needs one
    ('adc_range = "1.2"', "sensing.reference"),       # the 1.5 V set point would lie outside the ADC range
    ('computation_delay = "-1u"', "digital.computation_delay"),
])
def test_bad_digital_fields_name_field_and_allowed(table, field):
    with open("sample_designs/inverting_mcu_minus12v.toml", encoding="utf-8") as fh:
        text = fh.read()
    key = table.split("=")[0].strip()
    lines = [ln for ln in text.splitlines() if not ln.startswith(f"{key} ")]
    text = "\n".join(lines).replace("[digital]", "[digital]\n" + table)
    with pytest.raises(DesignError) as exc:
        loads_design(text)
    assert exc.value.field == field
    assert exc.value.allowed


def test_too_few_pwm_counts_are_refused_where_the_loop_is_analysed():
    """8 counts per period at 250 kHz: the field depends on fsw, so the session refuses it (the file loads)."""
    d = _design("inverting_mcu_minus12v")
    with pytest.raises(DesignError) as exc:
        LoopSession(replace(d, digital=replace(d.digital, pwm_clock=2e6)))
    assert exc.value.field == "digital.pwm_clock" and "counts" in exc.value.allowed


def test_loop_delay_of_each_carrier_and_update():
    """Corradini et al. ch. 3 (from memory): with the duty written at the sample instant the modulator's own
    delay is D Ts (trailing edge), (1 - D) Ts (leading edge), Ts/2 (symmetric); a shadow register loaded at
    the next period adds one Ts; a write after the edge has passed waits for the next period's edge."""
    d = _design("buck_dsp_5v")
    ts = 1.0 / d.stage.fsw
    duty = np.array([0.2, 0.5, 0.8])
    cases = [
        (Digital(carrier="trailing-edge", update="immediate"), duty * ts),
        (Digital(carrier="leading-edge", update="immediate"), (1 - duty) * ts),
        (Digital(carrier="symmetric", update="immediate"), np.full(3, 0.5 * ts)),
        (Digital(carrier="trailing-edge", update="next-period"), ts + duty * ts),
        (Digital(carrier="trailing-edge", update="next-period", computation_delay=1.5 * ts), 2 * ts + duty * ts),
        # written 0.3 Ts after the sample: the edge at 0.2 Ts has gone, the others move in this period
        (Digital(carrier="trailing-edge", update="immediate", computation_delay=0.3 * ts), np.r_[1.2, 0.5, 0.8] * ts),
    ]
    for dig, expected in cases:
        np.testing.assert_allclose(loop_delay_s(replace(d, digital=replace(dig, pwm_clock=1e9)), duty), expected,
                                   rtol=1e-12)


# ---------------------------------------------------------------------------- the designed loop
@pytest.mark.parametrize("name", SAMPLES)
def test_samples_meet_their_targets(name):
    res = _result(name)
    assert res.met, [f.message for f in res.findings if f.severity == "error"]
    assert res.f_hz[-1] == 0.5 / res.digital.ts_s  # the analysis ends at fs/2 exactly
    b, a = res.digital.controller.difference_equation(0)
    np.testing.assert_array_equal(b, res.digital.b)
    assert a[0] == 1.0


@pytest.mark.parametrize("name", SAMPLES)
def test_direct_design_puts_the_design_corner_at_fc_with_the_target_pm(name):
    """python-control evaluates the designed loop at fc: |T| = 1 and angle(-T) = PM (the definition)."""
    res = _result(name)
    k, fc, ts = res.design_corner, res.targets.fc_hz, res.digital.ts_s
    t = res.loop.to_control(k)(np.exp(2j * np.pi * fc * ts))
    np.testing.assert_allclose(abs(t), 1.0, atol=1e-9)
    np.testing.assert_allclose(np.degrees(np.angle(-t)), res.targets.pm_deg, atol=1e-6)


@pytest.mark.parametrize("name", SAMPLES)
def test_loop_gain_equals_brute_force_simulation(name):
    """The whole designed loop Tu(z) C(z) against the literal sampled simulation at 10 frequencies from
    0.004 fs to 0.49 fs (the controller is zero at fs/2 only when it has a zero there; not these), at the
    design corner and at another: the issue's 0.1 dB and 1 deg.  The simulation moves the PWM edge (a pulse
    at the edge, tests/reference/sampled_sim.py), as the switching simulation shows the converter does
    (tests/test_switching_digital.py)."""
    res = _result(name)
    ts, tau = res.digital.ts_s, res.digital.delay_s
    bins = (4, 20, 64, 150, 256, 350, 425, 480, 505, 512)
    for k in sorted({res.design_corner, 0}):
        f, t_last, t_before = loop_gain(*_desc(_chain(name), k), ts, tau[k],
                                        res.digital.b, res.digital.a, window=1024, bins=bins, settle_windows=4,
                                        hold="edge")
        assert np.max(np.abs(t_last / t_before - 1)) < 1e-6  # settled
        assert f[-1] == pytest.approx(0.5 / ts)
        ratio = t_last / res.loop.take(k).response(f)[0]
        assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 0.1
        assert np.max(np.abs(np.degrees(np.angle(ratio)))) < 1.0


@functools.cache
def _chain(name):
    """The continuous chain ADC codes per PWM step (sensing, anti-alias pole, Gvd), from the scheme."""
    return LoopSession(_design(name)).scheme.tu


@pytest.mark.parametrize("name", SAMPLES)
def test_closed_loop_step_equals_brute_force_simulation(name):
    """A step of one PWM step added at the controller's output: the output samples from the z-domain closed
    loop Tu / (1 + Tu C) against the literal simulation of the same loop."""
    res = _result(name)
    k = res.design_corner
    n = 3000
    y_model = closed_loop_step(res, k, n, "duty")
    _, y_sim, _ = simulate(*_desc(_chain(name), k), res.digital.ts_s, res.digital.delay_s[k], res.digital.b,
                           res.digital.a, np.ones(n), hold="edge")
    scale = np.max(np.abs(y_sim))
    assert scale > 0
    np.testing.assert_allclose(y_model, y_sim, atol=1e-6 * scale)
    # and the integrator removes the disturbance: the output returns towards 0 (final value theorem)
    assert abs(y_sim[-1]) < 0.05 * scale


@pytest.mark.parametrize("name", SAMPLES)
def test_margins_equal_python_control(name):
    res = _result(name)
    assert_margins_equal_control(res.margins, res.loop)


def test_sampled_chain_equals_python_control_and_scipy_zoh():
    """The scheme's chain (differential amplifier and anti-alias poles, ADC and PWM scaling, Gvd) behind a
    hold with a whole-sample delay: python-control ``sample_system(zoh)`` times z^-1 and scipy
    ``cont2discrete(zoh)`` (FPW ch. 4)."""
    name = "inverting_mcu_minus12v"
    chain, ts = _chain(name), _result(name).digital.ts_s
    f = np.geomspace(10.0, 0.5 / ts * 0.999, 100)
    z = np.exp(2j * np.pi * f * ts)
    ours = sampled_plant(chain, ts, ts)
    for k in (0, chain.n_corners - 1):
        num, den = _desc(chain, k)
        ref = control.sample_system(control.tf(num, den), ts, method="zoh")
        np.testing.assert_allclose(ours.response(f)[k], ref(z) / z, rtol=1e-7)
        bz, az, _ = ss.cont2discrete((num, den), ts, method="zoh")
        _, h = ss.freqz(np.atleast_1d(np.squeeze(bz)), az, worN=f, fs=1 / ts)
        np.testing.assert_allclose(ours.response(f)[k], h / z, rtol=1e-7)


def test_tustin_comparison_equals_python_control_and_matches_analog_at_fc():
    """The Tustin comparison controller: python-control ``sample_system(tustin, prewarp at fc)`` of the analog
    design, and equal to the analog controller at fc exactly (FPW ch. 6)."""
    res = _result("buck_dsp_5v")
    k, fc, ts = res.design_corner, res.targets.fc_hz, res.digital.ts_s
    chain = _chain("buck_dsp_5v").take(k) * Rational.from_factors(1.0, (), (), delay_s=res.digital.delay_s[k])
    analog, _ = analog_design("type3", chain, fc, res.targets.pm_deg)
    ours = res.digital.designs["tustin"].controller
    f = np.geomspace(10.0, 0.5 / ts * 0.999, 200)
    ref = control.sample_system(analog.to_control(0), ts, method="tustin", prewarp_frequency=TWO_PI * fc)
    np.testing.assert_allclose(ours.response(f)[0], ref(np.exp(2j * np.pi * f * ts)), rtol=1e-6)
    np.testing.assert_allclose(ours.response([fc])[0], analog.response([fc])[0], rtol=1e-9)
    np.testing.assert_allclose(tustin(analog, ts, fc).response(f), ours.response(f), rtol=1e-12)


@pytest.mark.parametrize("fc,pm", [(100e3, 80.0), (100e3, 170.0)])
def test_targets_past_what_the_loop_allows_are_infeasible_with_a_reason(fc, pm):
    """100 kHz is fs/5: the phase is there for 80 deg but the loop then crosses 0 dB more than once or is
    unstable (refused as for analog loops); 170 deg is more than any type3 gives."""
    d = _design("buck_dsp_5v")
    res = LoopSession(d).run(replace(loopkit.loop.Targets.from_design(d), fc_hz=fc, pm_deg=pm))
    assert not res.feasible
    assert any(f.code == "infeasible" and "compensator." in f.message for f in res.findings)
    assert any(f.code == "fc-fs" and f.severity == "error" for f in res.findings)  # above fs/10


# ---------------------------------------------------------------------------- CLI
class _Run:
    def __init__(self, returncode, stdout, stderr):
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr


@pytest.fixture
def _cli(capsys):
    """Run ``loopkit ARGS`` in this process (as tests/test_cli.py does): exit code, stdout, stderr."""

    def run(*args):
        code = main([str(a) for a in args])
        out = capsys.readouterr()
        return _Run(code, out.out, out.err)

    return run


@pytest.mark.parametrize("name", SAMPLES)
def test_cli_design_exits_0_and_prints_the_coefficients(name, _cli):
    out = _cli("design", f"sample_designs/{name}.toml")
    assert out.returncode == 0, out.stderr
    res = _result(name)
    assert f"{res.digital.b[1]:.12g}" in out.stdout
    assert "Nyquist" in out.stdout and "Caution" in out.stdout


def test_cli_bode_ends_at_nyquist_and_export_json_has_plain_floats(tmp_path, _cli):
    name = "buck_dsp_5v"
    out = _cli("bode", f"sample_designs/{name}.toml", "--loop", "--points", "20")
    assert out.returncode == 0, out.stderr
    last = out.stdout.strip().splitlines()[-1].split(",")
    assert float(last[0]) == pytest.approx(0.5 * _result(name).digital.fs_hz)
    assert _cli("bode", f"sample_designs/{name}.toml", "--loop", "--fmax", "1M").returncode == 2
    path = tmp_path / "out.json"
    assert _cli("export", f"sample_designs/{name}.toml", "--json", str(path)).returncode == 0
    doc = json.loads(path.read_text())["digital"]
    assert doc["b"] == [float(x) for x in _result(name).digital.b]
    assert all(isinstance(x, float) for x in doc["a"])
    bad = _cli("export", f"sample_designs/{name}.toml", "--bom", str(tmp_path / "b.csv"))
    assert bad.returncode == 2 and "no parts" in bad.stderr
    step = _cli("step", f"sample_designs/{name}.toml", "--load", "1:2")  # the sampled loop's step (test_digital_step.py)
    assert step.returncode == 0 and "sampled loop" in step.stdout, step.stderr
