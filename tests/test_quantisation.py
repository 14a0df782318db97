"""Resolution limits per corner against hand-computed cases.

Sources:
- [PS03] A. V. Peterchev, S. R. Sanders, "Quantization resolution and limit cycling in digitally
  controlled PWM converters", IEEE Trans. Power Electronics 18(1), 301-308, 2003, sec. III
  (no-limit-cycle conditions: the DPWM's output step below the ADC's LSB at the output; integral
  action) and sec. IV (dither adds bits of effective DPWM resolution). From memory: the equation
  numbers were not re-read, so none is cited; the strict "<" is from memory too.
- [CCPE] Control Circuits in Power Electronics (IET), ch. 4 "Digital control of DC-DC power
  converters", fig. 4.6 and its text, read in a stored page: with n_DPWM = 9 the buck's levels are
  q_D Vg ~ 23 mV apart, strictly larger than the A/D bin q_A/D ~ 15.6 mV, and the loop limit-cycles.
  Vg is not in the excerpt: 23 mV x 2^9 = 11.8 V, so a 12 V input (23.4 mV) is taken.
- [EM] R. W. Erickson, D. Maksimovic, Fundamentals of Power Electronics, 2nd ed., Table 8.2 (from
  memory): DC control-to-output gain Gd0 = V/D for the buck (= Vg), V/D' for the boost.
"""

import numpy as np
import pytest

from loopkit.errors import DesignError
from loopkit.quantisation import check_resolution


def test_buck_example_breaks_at_9_bits_and_holds_at_10():
    """[CCPE] fig. 4.6: 12 V buck, 9-bit DPWM: 12/512 = 23.4 mV > 15.625 mV (a 6-bit ADC over 1 V at the
    output, H = 1) -> limit cycle; 10 bits: 11.7 mV < 15.625 mV -> none."""
    r = check_resolution([12.0], [0.3], adc_bits=6, adc_range_v=1.0, sensing_gain=1.0, pwm_counts=512)
    np.testing.assert_allclose(r.dv_pwm_v, 0.0234375, rtol=1e-12)
    np.testing.assert_allclose(r.dv_pwm_v, 0.023, rtol=0.03)  # the figure's "~23 mV"
    np.testing.assert_allclose(r.dv_adc_v, 0.015625, rtol=1e-12)  # the figure's "~15.6 mV"
    assert not r.fine_enough[0]
    assert [(f.code, f.corner, f.severity) for f in r.findings] == [("pwm-coarser-than-adc", 0, "error")]
    # fix: N > 12 / 0.015625 = 768 -> 769 counts (10 bits); or 512 x 2^d > 768 -> d = 1
    assert (r.pwm_counts_needed[0], r.pwm_bits_needed[0], r.dither_bits_needed[0]) == (769, 10, 1)
    r10 = check_resolution([12.0], [0.3], adc_bits=6, adc_range_v=1.0, sensing_gain=1.0, pwm_counts=1024)
    assert r10.fine_enough[0] and r10.findings == ()


def test_boost_hand_computed_with_dither():
    """[EM] Table 8.2 boost: Vg = 5 V, D = 0.5 -> V = 10 V, Gd0 = V/D' = 20 V per unit duty.
    10-bit ADC over 3.3 V behind H = 1/4: 3.3/1024/0.25 = 12.890625 mV at the output.
    256 counts: 20/256 = 78.125 mV -> breaks; N > 20/0.012890625 = 1551.5 -> 1552 counts (11 bits),
    a 388 MHz clock at 250 kHz; dither: 256 x 2^d > 1551.5 -> d = 3 ([PS03] sec. IV)."""
    r = check_resolution([20.0], [0.5], 10, 3.3, 0.25, 256, fsw_hz=250e3)
    np.testing.assert_allclose(r.dv_pwm_v, 0.078125, rtol=1e-12)
    np.testing.assert_allclose(r.dv_adc_v, 0.012890625, rtol=1e-12)
    assert not r.fine_enough[0]
    assert (r.pwm_counts_needed[0], r.pwm_bits_needed[0], r.dither_bits_needed[0]) == (1552, 11, 3)
    np.testing.assert_allclose(r.pwm_clock_needed_hz, 388e6, rtol=1e-12)
    msg = r.findings[0].message
    assert "1552 PWM counts" in msg and "11 bits" in msg and "388MHz" in msg and "3 dither bits" in msg
    # the same PWM with 3 dither bits: 20/2048 = 9.77 mV < 12.89 mV; with 2: 19.5 mV, still too coarse
    assert check_resolution([20.0], [0.5], 10, 3.3, 0.25, 256, dither_bits=3).fine_enough[0]
    assert not check_resolution([20.0], [0.5], 10, 3.3, 0.25, 256, dither_bits=2).fine_enough[0]


def test_equal_steps_break_the_condition():
    """[PS03] asks the DPWM step to be strictly smaller (from memory): 1 V / 64 counts = 1 V / 2^6 codes."""
    r = check_resolution([1.0], [0.5], 6, 1.0, 1.0, 64)
    assert r.dv_pwm_v[0] == r.dv_adc_v[0] and not r.fine_enough[0]
    assert r.pwm_counts_needed[0] == 65


def test_only_the_corner_that_breaks_is_named():
    """A buck over 18, 24, 32 V in, sensed by a divider to a 0.8 V reference (H = 0.8/3.3), 10-bit ADC
    over 3.3 V: 3.3/1024/(0.8/3.3) = 13.2935 mV at the output; 2048 counts: 8.79, 11.72, 15.63 mV, so
    only 32 V breaks; N > 32/0.0132935 = 2407.2 -> 2408 counts (12 bits, 963.2 MHz at 400 kHz), or
    2048 x 2^d > 2407.2 -> d = 1."""
    vin = np.array([18.0, 24.0, 32.0])
    r = check_resolution(vin, 3.3 / vin, 10, 3.3, 0.8 / 3.3, 2048, fsw_hz=400e3)
    np.testing.assert_allclose(r.dv_adc_v, 3.3 * 3.3 / (1024 * 0.8), rtol=1e-12)
    assert r.fine_enough.tolist() == [True, True, False]
    assert [f.corner for f in r.findings] == [2]
    assert (r.pwm_counts_needed[2], r.pwm_bits_needed[2], r.dither_bits_needed[2]) == (2408, 12, 1)
    np.testing.assert_allclose(r.pwm_clock_needed_hz[2], 2408 * 400e3, rtol=1e-12)
    assert "D = 0.103" in r.findings[0].message
    # a per-corner sensing gain is taken corner by corner
    r2 = check_resolution(vin, 3.3 / vin, 10, 3.3, [0.8 / 3.3, 0.8 / 3.3, 0.4 / 3.3], 2048)
    assert r2.fine_enough.tolist() == [True, True, True]


def test_integral_action_is_required():
    r = check_resolution([12.0], [0.3], 6, 1.0, 1.0, 1024, has_integrator=False)
    assert r.fine_enough[0]
    assert [(f.code, f.corner, f.severity) for f in r.findings] == [("no-integral-action", None, "error")]


BAD = [
    ({"gvd_dc": [0.0]}, "gvd_dc"),
    ({"gvd_dc": [np.nan]}, "gvd_dc"),
    ({"duty": [1.2]}, "duty"),
    ({"duty": [0.3, 0.4]}, "duty"),
    ({"adc_bits": 0}, "adc_bits"),
    ({"adc_bits": 12.0}, "adc_bits"),
    ({"adc_range_v": -3.3}, "adc_range_v"),
    ({"sensing_gain": [1.0, 2.0]}, "sensing_gain"),
    ({"pwm_counts": 1}, "pwm_counts"),
    ({"dither_bits": -1}, "dither_bits"),
    ({"has_integrator": "yes"}, "has_integrator"),
    ({"fsw_hz": 0.0}, "fsw_hz"),
]


@pytest.mark.parametrize("kw,field", BAD, ids=[next(iter(k)) + str(i) for i, (k, _) in enumerate(BAD)])
def test_bad_input_is_a_design_error(kw, field):
    args = {"gvd_dc": [12.0], "duty": [0.3], "adc_bits": 10, "adc_range_v": 3.3, "sensing_gain": 0.25,
            "pwm_counts": 256}
    args.update(kw)
    with pytest.raises(DesignError) as err:
        check_resolution(**args)
    assert err.value.field == field


# ---------------------------------------------------------------------------- against a sampled simulation
def _buck_type3_counts(adc_bits, pwm_counts):
    """The sample buck's 20 kHz Type III (its own zeros and poles, Tustin at fc) in counts for this ADC and PWM."""
    from dataclasses import replace

    import loopkit
    from loopkit.digital_control import tustin
    from loopkit.fixedpoint import adc_error_range, pwm_limits, realise
    from loopkit.loop import LoopSession
    from loopkit.rational import Rational
    from loopkit.result import Targets

    design = loopkit.load_design("sample_designs/buck_24v_3v3.toml")
    fc = 20e3
    res = LoopSession(design).run(replace(Targets.from_design(design), fc_hz=fc))
    ts = 1.0 / res.stage.fsw_hz
    (z1, z2), (_, p1, p2) = res.zeros_hz, res.poles_hz
    ideal = Rational.from_roots_hz(1.0, [-z1, -z2], [0.0, -p1, -p2])
    ideal = ideal * (abs(res.compensator.response([fc])[0, 0]) / abs(ideal.response([fc])[0, 0]))
    lsb = 3.3 / 2**adc_bits
    b, a = (tustin(ideal, ts, fc) * (lsb * pwm_counts / design.modulator.ramp)).difference_equation(0)
    return realise(b, a, ts, adc_error_range(adc_bits), pwm_limits(pwm_counts, 0.0, 0.85)), design


def _simulate(adc_bits, pwm_counts, load_a=3.0, samples=8000):
    """Averaged synchronous buck (Erickson & Maksimovic 2nd ed. ch. 7: L di/dt = d Vg - v - r i,
    C dv/dt = i - v/R), exact between samples (matrix exponential, duty held), 24 V in, ``load_a`` out; the
    output sampled through the 0.8/3.3 divider by an ADC (floor to a code), the fixed-point controller,
    the duty u/N applied at once.  Returns the last 2000 ADC codes and PWM values."""
    from scipy.linalg import expm

    ctrl, design = _buck_type3_counts(adc_bits, pwm_counts)
    st = design.stage
    vg, vo, r_load = 24.0, 3.3, 3.3 / load_a
    ell, cap, r = st.inductance, sum(c.capacitance * c.count for c in st.output_caps), st.dcr + st.r_switch
    ts = 1.0 / st.fsw
    a_c = np.array([[-r / ell, -1.0 / ell], [1.0 / cap, -1.0 / (r_load * cap)]])
    big = np.zeros((3, 3))
    big[:2, :2], big[:2, 2] = a_c * ts, np.array([vg / ell, 0.0]) * ts
    m = expm(big)
    phi, gam = m[:2, :2], m[:2, 2]
    h, lsb = 0.8 / 3.3, 3.3 / 2**adc_bits
    ref_code = int(np.floor(0.8 / lsb))
    duty0 = vo / vg
    x = np.array([vo / r_load, vo])
    step = ctrl.stepper(round(duty0 * pwm_counts))
    codes, us = [], []
    for _ in range(samples):
        code = min(max(int(np.floor(h * x[1] / lsb)), 0), 2**adc_bits - 1)
        u = step(ref_code - code)
        x = phi @ x + gam * (u / pwm_counts)
        codes.append(code)
        us.append(u)
    return np.array(codes[-2000:]), np.array(us[-2000:]), ctrl


@pytest.mark.slow
@pytest.mark.parametrize("adc_bits,pwm_counts,breaks", [(12, 250, True), (10, 1000, True), (8, 1000, False),
                                                        (12, 8192, False)])
def test_limit_cycle_appears_only_where_the_condition_breaks(adc_bits, pwm_counts, breaks):
    """The check's verdict against a sampled simulation with both quantisers (averaged plant, not a
    switching simulation), at loads from 0.5 A to 3 A.  Where (a) holds (8-bit ADC: 53 mV at the
    output, 1000 counts: 24 mV; 12-bit: 3.3 mV, 8192 counts: 2.9 mV) the loop settles to one PWM value
    and one ADC code at every load.  Where it breaks (12-bit with 250 counts: 96 mV; 10-bit, 13.3 mV,
    with 1000 counts: 24 mV) the output hunts between PWM levels at some loads: at a load where a PWM
    level happens to fall inside the zero-error bin it may still settle, which is why [PS03]'s
    condition is stated for every operating point and [CCPE] speaks of intervals of load current."""
    r = check_resolution([24.0], [3.3 / 24], adc_bits, 3.3, 0.8 / 3.3, pwm_counts)
    assert r.fine_enough[0] == (not breaks)
    hunting = []
    for load in np.linspace(0.5, 3.0, 6):
        codes, us, _ = _simulate(adc_bits, pwm_counts, load)
        hunts = np.ptp(us) > 0 or np.ptp(codes) > 0
        if hunts:  # a limit cycle, not a drift or a runaway: it keeps returning to a few neighbouring values
            assert np.ptp(us) <= 4
        hunting.append(hunts)
    assert any(hunting) == breaks
