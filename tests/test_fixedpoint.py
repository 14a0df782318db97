"""Fixed-point controller and its C header, checked against outside references.

- gcc (the system C compiler) compiles the generated header with a small driver, under
  -std=c99 -Wall -Wextra -Werror -pedantic and UndefinedBehaviorSanitizer (a signed overflow or a
  bad shift aborts the run); its output on a random error sequence with saturating stretches must
  equal :meth:`FixedPointController.run` bit for bit.
- scipy.signal ``lfilter``/``freqz``: the fixed-point output against the floating-point filter
  with the same (quantised) coefficients, within the l1 bound of the rounding noise
  (A. V. Oppenheim, R. W. Schafer, Discrete-Time Signal Processing, 3rd ed., 2010, sec. 6.9, from
  memory: a filter's output to an input bounded by q is bounded by q sum |h|); the quantised
  response against the exact one.
- python-control ``stability_margins``: the margins after quantisation.
- Python's ``decimal`` (ROUND_HALF_UP, which rounds halves away from zero): the rounding rule.

The controllers are realistic: the sample buck's own Type III placement (zeros and poles from
loopkit's synthesis), as an ideal Type III matched to the network's gain at fc, Tustin-prewarped
at fc (loopkit.digital_control) and scaled to counts (12-bit ADC over 3.3 V, 250 PWM counts per
period, the design's own ramp).
"""

import decimal
import functools
import shutil
import subprocess
from dataclasses import replace

import numpy as np
import pytest
import scipy.signal as ss

import loopkit
from loopkit.cautions import CAUTION
from loopkit.cheader import c_header, write_c_header
from loopkit.digital_control import digital_pi, tustin
from loopkit.discrete import nyquist_grid
from loopkit.errors import DesignError
from loopkit.fixedpoint import adc_error_range, margins_before_after, pwm_limits, realise, rshift_round
from loopkit.loop import LoopSession
from loopkit.rational import Rational
from loopkit.result import Targets
from loopkit.sampled import modulator_delay_s, sampled_plant

ADC_BITS, ADC_RANGE_V, PWM_COUNTS = 12, 3.3, 250  # a 100 MHz PWM clock at 400 kHz
ADC_LSB_V = ADC_RANGE_V / 2**ADC_BITS
GCC = shutil.which("gcc")
needs_gcc = pytest.mark.skipif(GCC is None, reason="gcc not installed (.ci/run installs it with apt-get)")


@functools.cache
def _buck(fc_hz: float):
    design = loopkit.load_design("sample_designs/buck_24v_3v3.toml")
    return LoopSession(design).run(replace(Targets.from_design(design), fc_hz=fc_hz))


def _type3(fc_hz: float, oversampling: int = 1):
    """(b, a) in counts, the sample period and the analog result of the buck's digital Type III."""
    res = _buck(fc_hz)
    ts = 1.0 / (res.stage.fsw_hz * oversampling)
    z1, z2 = res.zeros_hz
    _, p1, p2 = res.poles_hz
    ideal = Rational.from_roots_hz(1.0, [-z1, -z2], [0.0, -p1, -p2])
    ideal = ideal * (abs(res.compensator.response([fc_hz])[0, 0]) / abs(ideal.response([fc_hz])[0, 0]))
    counts = tustin(ideal, ts, fc_hz) * (ADC_LSB_V * PWM_COUNTS / res.design.modulator.ramp)
    b, a = counts.difference_equation(0)
    return b, a, ts, res


def _realised(fc_hz, oversampling=1, **kw):
    b, a, ts, _ = _type3(fc_hz, oversampling)
    return realise(b, a, ts, adc_error_range(ADC_BITS), pwm_limits(PWM_COUNTS, 0.0, 0.85), **kw)


CASES = {
    # name: (crossover, samples per switching period, options): fs/fc = 10, 20 and 100
    "type3-fs10": (40e3, 1, {}),
    "type3-fs20-16bit": (20e3, 1, {"word_bits": 16}),
    "type3-fs100": (20e3, 5, {}),
}


def _controller(name):
    if name == "lead-bipolar":  # the buck's first zero and pole as a lead stage (no integrator), output +-300
        _, _, ts, res = _type3(40e3)
        lead = Rational.from_roots_hz(1.0, [-res.zeros_hz[0]], [-res.poles_hz[1]])
        b, a = (tustin(lead, ts, 40e3) * 2.0).difference_equation(0)
        return realise(b, a, ts, adc_error_range(ADC_BITS), (-300, 300))
    if name == "proportional":  # no past outputs at all (the header's NA = 0 branch)
        return realise([0.75], [1.0], 1 / 400e3, adc_error_range(ADC_BITS), (-250, 250))
    if name == "pi":
        ts = 1 / 250e3
        b, a = digital_pi(0.9, 0.97, ts).difference_equation(0)
        return realise(b, a, ts, adc_error_range(10), pwm_limits(256, 0.02, 0.9))
    fc, over, kw = CASES[name]
    return _realised(fc, over, **kw)


# ---------------------------------------------------------------------------- the C header, bit-exact
DRIVER = r"""#include <stdio.h>
#include "ctrl.h"
int main(void)
{
    lk_state_t s;
    long e, u0;
    if (scanf("%ld", &u0) != 1) return 2;
    lk_init(&s, (int32_t)u0);
    while (scanf("%ld", &e) == 1) {
        printf("%ld\n", (long)lk_step(&s, (int32_t)e));
    }
    return 0;
}
"""


def _compiled(tmp_path, ctrl):
    write_c_header(tmp_path / "ctrl.h", ctrl, prefix="lk", title="sample buck, digital Type III")
    (tmp_path / "driver.c").write_text(DRIVER)
    exe = tmp_path / "driver"
    subprocess.run([GCC, "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O2", "-fsanitize=undefined",
                    "-fno-sanitize-recover=all", str(tmp_path / "driver.c"), "-o", str(exe)],
                   check=True, capture_output=True, text=True)
    return exe


def _run_c(exe, errors, u0=0):
    text = "\n".join(map(str, [u0, *errors])) + "\n"
    done = subprocess.run([str(exe)], input=text, capture_output=True, text=True, check=True, timeout=60)
    return np.array(done.stdout.split(), dtype=np.int64)


def _errors(rng, e_max):
    """Random errors: small noise, full-scale stretches both ways (saturating the duty), random full range."""
    return np.concatenate([
        rng.integers(-20, 21, 1500), np.full(400, e_max), rng.integers(-3, 4, 300), np.full(400, -e_max),
        rng.integers(-e_max, e_max + 1, 400), np.full(200, 2 * e_max), rng.integers(-2, 3, 800)])


@needs_gcc
@pytest.mark.parametrize("name", [*CASES, "pi", "lead-bipolar", "proportional"])
def test_c_header_equals_python_model_bit_for_bit(tmp_path, name):
    ctrl = _controller(name)
    rng = np.random.default_rng(20261203)
    e = _errors(rng, ctrl.e_max)
    exe = _compiled(tmp_path, ctrl)
    for u0 in (0, (ctrl.u_min + ctrl.u_max) // 2):
        c_out = _run_c(exe, e, u0)
        py_out = ctrl.run(e, u_init=u0)
        assert c_out.shape == e.shape
        np.testing.assert_array_equal(c_out, py_out)
        # the sequence drives the output into both limits, so saturation and anti-windup are exercised
        assert np.any(py_out == ctrl.u_max) and np.any(py_out == ctrl.u_min)
        assert np.all((py_out >= ctrl.u_min) & (py_out <= ctrl.u_max))
    # rows of the vectorised model are independent runs
    rows = np.stack([e, -e, np.roll(e, 7)])
    np.testing.assert_array_equal(ctrl.run(rows)[1], ctrl.run(-e))
    np.testing.assert_array_equal(ctrl.run(rows)[2], _run_c(exe, np.roll(e, 7)))


@needs_gcc
def test_worst_case_accumulator_does_not_overflow_in_c(tmp_path):
    """Errors at the range's ends with the signs that maximise |acc| (the bound's own worst case), and a
    realisation made for a huge error range (the automatic choice then gives up fractional bits):
    UndefinedBehaviorSanitizer would abort on a signed overflow."""
    b, a, ts, _ = _type3(40e3)
    ctrl = realise(b, a, ts, (-(2**31) + 1, 2**31 - 1), (-(2**20), 2**20))
    assert ctrl.acc_bits <= 63
    exe = _compiled(tmp_path, ctrl)
    signs = np.sign(np.asarray(ctrl.b_int))
    worst = np.concatenate([np.tile(s * ctrl.e_max * signs[::-1], 50) for s in (1, -1)])
    np.testing.assert_array_equal(_run_c(exe, worst), ctrl.run(worst))


def test_rounding_is_half_away_from_zero():
    """Against decimal's ROUND_HALF_UP (halves away from zero), including exact halves and large values."""
    rng = np.random.default_rng(7)
    x = np.concatenate([rng.integers(-(2**61), 2**61, 300), np.arange(-40, 41), [2**61, -(2**61), 12, -12, 4, -4]])
    for s in (0, 1, 2, 3, 17, 40):
        got = rshift_round(x, s)
        want = [int((decimal.Decimal(int(v)) / (2**s)).quantize(0, rounding=decimal.ROUND_HALF_UP)) for v in x]
        np.testing.assert_array_equal(got, np.array(want, dtype=np.int64))


# ---------------------------------------------------------------------------- accuracy of the realisation
@pytest.mark.parametrize("name", [*CASES, "pi"])
def test_fixed_point_follows_float_filter_within_the_noise_bound(name):
    """Unsaturated run from a mid-range start: |fixed point - lfilter(quantised coefficients)| stays within
    the stated bound; the float filter's own output must stay inside the limits for the comparison to hold."""
    ctrl = _controller(name)
    rng = np.random.default_rng(11)
    n = 3000
    e = rng.integers(-3, 4, n)
    e = e - round(e.mean())  # keep the integrator near where it started
    u0 = (ctrl.u_min + ctrl.u_max) // 2
    bq, aq = ctrl.b_quantised, ctrl.a_quantised
    zi = ss.lfiltic(bq, aq, y=np.full(aq.size - 1, float(u0)), x=np.zeros(bq.size - 1))
    ref = ss.lfilter(bq, aq, e.astype(float), zi=zi)[0]
    assert ref.min() > ctrl.u_min + 1 and ref.max() < ctrl.u_max - 1  # no saturation in this comparison
    got = ctrl.run(e, u_init=u0)
    bound = ctrl.noise_bound(n)
    assert np.max(np.abs(got - ref)) <= bound
    assert bound < 2.0  # a bound that says something: within 2 PWM counts over the whole run


@pytest.mark.parametrize("name", [*CASES, "pi"])
def test_quantised_response_error_equals_scipy_freqz(name):
    ctrl = _controller(name)
    f = nyquist_grid(ctrl.ts_s, 1e-5 / ctrl.ts_s, 400)
    _, h = ss.freqz(ctrl.b, ctrl.a, worN=f, fs=1 / ctrl.ts_s)
    _, hq = ss.freqz(ctrl.b_quantised, ctrl.a_quantised, worN=f, fs=1 / ctrl.ts_s)
    keep = np.abs(h) > 1e-9 * np.max(np.abs(h))  # not at a zero on the unit circle (Tustin's at fs/2)
    ratio = hq[keep] / h[keep]
    np.testing.assert_allclose(ctrl.gain_error_db, np.max(np.abs(20 * np.log10(np.abs(ratio)))), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(ctrl.phase_error_deg, np.max(np.abs(np.degrees(np.angle(ratio)))), rtol=1e-6,
                               atol=1e-9)
    # the Discrete of the quantised controller is the same filter
    np.testing.assert_allclose(ctrl.quantised().response(f)[0], hq, rtol=1e-7, atol=1e-9 * np.max(np.abs(hq)))


def test_direct_form_word_length_against_the_sampling_ratio():
    """Measured (module notes of loopkit.fixedpoint): 16-bit coefficients keep the Type III within the default
    tolerance at fs/fc = 10 and 20, not at fs/fc = 100, where the automatic choice takes 32 bits, which
    keep it within 0.01 dB and 0.01 deg."""
    for fc, over in ((40e3, 1), (20e3, 1)):
        c16 = _realised(fc, over, word_bits=16)
        assert c16.gain_error_db < 0.05 and c16.phase_error_deg < 0.5
        assert _realised(fc, over).word_bits == 16
    c16 = _realised(20e3, 5, word_bits=16)
    assert c16.gain_error_db > 1.0 or c16.phase_error_deg > 5.0
    auto = _realised(20e3, 5)
    assert auto.word_bits == 32 and auto.gain_error_db < 0.01 and auto.phase_error_deg < 0.01


@pytest.mark.parametrize("name", [*CASES, "pi"])
def test_integrator_stays_exact(name):
    """2^fa + sum A_j = 0: the quantised controller keeps its pole at z = 1 exactly; under a constant error
    the output follows the floating-point integrator (lfilter) within the noise bound and moves by many
    counts: no dead band (the output stuck at its start) and no leak (settling short of the ramp)."""
    ctrl = _controller(name)
    assert 2**ctrl.a_frac_bits + sum(ctrl.a_int) == 0
    n = 20000
    a = ctrl.a_quantised
    ki = float(np.sum(ctrl.b_quantised)) / float(-np.dot(np.arange(a.size), a))  # ramp per sample, A = (1 - z^-1) A2
    step = max(1, int(np.ceil(10.0 / (ki * n))))  # one count where that moves the output 10 counts in n steps
    e = np.full(n, step)
    u0 = ctrl.u_min + 1
    zi = ss.lfiltic(ctrl.b_quantised, a, y=np.full(len(ctrl.a_int), float(u0)), x=np.zeros(len(ctrl.b_int) - 1))
    ref = ss.lfilter(ctrl.b_quantised, a, e.astype(float), zi=zi)[0]
    out = ctrl.run(e, u_init=u0)
    inside = np.nonzero(ref > ctrl.u_max - 1)[0]
    m = inside[0] if inside.size else n  # compared up to the upper limit (beyond it the integrator is clamped)
    assert ref[m - 1] - u0 > 8.0
    assert np.max(np.abs(out[:m] - ref[:m])) <= ctrl.noise_bound(m)
    assert out[-1] == (ctrl.u_max if inside.size else out[-1])


@pytest.mark.slow
def test_margins_before_and_after_quantisation_equal_python_control():
    control = pytest.importorskip("control")
    b, a, ts, res = _type3(40e3)
    for word in (16, 32):
        ctrl = realise(b, a, ts, adc_error_range(ADC_BITS), pwm_limits(PWM_COUNTS, 0.0, 0.85), word_bits=word)
        tau = modulator_delay_s("trailing-edge", res.stage.duty, ts) + 0.3 * ts
        plant = sampled_plant(res.open_loop.tu, ts, tau) * (res.design.modulator.ramp / (ADC_LSB_V * PWM_COUNTS))
        f = nyquist_grid(ts, 10.0, 1000)
        before, after = margins_before_after(plant, ctrl, f)
        assert np.all(before.stable) and np.all(after.stable)
        for k in range(plant.n_corners):
            if after.n_crossovers[k] != 1:
                continue
            _, pm, _, _, wgc, _ = control.stability_margins((plant * ctrl.quantised()).to_control(k))
            np.testing.assert_allclose(after.pm_deg[k], pm, atol=1e-4)
            np.testing.assert_allclose(after.fc_hz[k], wgc / (2 * np.pi), rtol=1e-6)
        # quantisation moves the phase margin by about the response's phase error
        assert np.max(np.abs(after.pm_deg - before.pm_deg)) <= ctrl.phase_error_deg + 0.05


# ---------------------------------------------------------------------------- overflow and bad input
def test_format_that_overflows_is_refused():
    """Too few integer bits (coefficients that do not fit the word) and an accumulator that could pass 2^62
    are refused with a DesignError naming frac_bits, never wrapped."""
    b, a, ts, _ = _type3(40e3)
    e_rng, u_rng = adc_error_range(ADC_BITS), pwm_limits(PWM_COUNTS, 0.0, 0.85)
    with pytest.raises(DesignError) as err:
        realise(b, a, ts, e_rng, u_rng, word_bits=16, frac_bits=20)
    assert err.value.field == "frac_bits" and "16-bit" in err.value.allowed
    with pytest.raises(DesignError) as err:
        realise(b, a, ts, (-(2**31) + 1, 2**31 - 1), u_rng, word_bits=32, frac_bits=30, state_frac_bits=30)
    assert err.value.field == "frac_bits" and "accumulator" in err.value.allowed
    ok = realise(b, a, ts, e_rng, u_rng, word_bits=32, frac_bits=30, state_frac_bits=8)  # the same format fits here
    assert ok.acc_bits <= 63


BAD = [
    ({"word_bits": 7}, "word_bits"),
    ({"word_bits": 33}, "word_bits"),
    ({"word_bits": "16"}, "word_bits"),
    ({"frac_bits": 63}, "frac_bits"),
    ({"frac_bits": (3, 2.5)}, "frac_bits"),
    ({"state_frac_bits": -1}, "state_frac_bits"),
    ({"e_range": (5, -5)}, "e_range"),
    ({"u_range": (100, 100)}, "u_range"),
    ({"a": [0.0, 1.0]}, "a"),
    ({"b": [np.nan, 1.0]}, "b, a"),
    ({"ts_s": 0.0}, "ts_s"),
]


@pytest.mark.parametrize("kw,field", BAD, ids=[f"{k}" for k, _ in BAD])
def test_bad_input_is_a_design_error(kw, field):
    args = {"b": [0.2, -0.19], "a": [1.0, -1.0], "ts_s": 4e-6, "e_range": (-1023, 1023), "u_range": (0, 230)}
    args.update(kw)
    with pytest.raises(DesignError) as err:
        realise(**args)
    assert err.value.field == field


def test_bad_runtime_input_and_limits():
    ctrl = _controller("pi")
    for bad in (np.array([0.5, 1.0]), np.array(["1"]), np.zeros((2, 2, 2), dtype=int), np.array([np.inf])):
        with pytest.raises(DesignError):
            ctrl.run(bad)
    with pytest.raises(DesignError) as err:
        pwm_limits(256, 0.9, 0.1)
    assert err.value.field == "duty limits"
    assert pwm_limits(250, 0.0, 0.85) == (0, 212)  # floor(0.85 x 250)
    assert adc_error_range(10) == (-1023, 1023)
    with pytest.raises(DesignError):
        adc_error_range(0)
    with pytest.raises(DesignError) as err:
        c_header(ctrl, prefix="Bad-Name")
    assert err.value.field == "prefix"


def test_header_carries_the_caution_and_the_formats(tmp_path):
    ctrl = _controller("type3-fs10")
    path = write_c_header(tmp_path / "ctrl.h", ctrl, prefix="buck_ctrl", title="24 V to 3.3 V buck")
    text = path.read_text()
    flat = " ".join(line.strip(" */") for line in text.splitlines()[:12])
    assert " ".join(CAUTION.split()) in " ".join(flat.split())
    assert "#include <stdint.h>" in text and "float" not in text.split("#endif")[0].split("typedef")[1]
    assert f"#define BUCK_CTRL_B_FRAC_BITS {ctrl.b_frac_bits}" in text
    assert f"#define BUCK_CTRL_U_MAX {ctrl.u_max}" in text
    assert f"#define BUCK_CTRL_FS_HZ {1 / ctrl.ts_s!r}" in text
    assert "{" + ", ".join(map(str, ctrl.b_int)) + "}" in text
    bipolar = c_header(_controller("lead-bipolar"), prefix="lead")
    assert "#define LEAD_U_MIN (-300)" in bipolar and "#define LEAD_Y_MIN (-INT64_C(" in bipolar
