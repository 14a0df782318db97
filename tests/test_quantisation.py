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
