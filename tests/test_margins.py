"""Margins against python-control's stability_margins and closed-loop poles.

Reference: python-control 0.10 ``stability_margins`` (gain margin as a ratio,
phase margin in deg, frequencies in rad/s) and ``feedback(...).poles()``; the
definitions are those of Erickson & Maksimovic, Fundamentals of Power
Electronics, 2nd ed. (2001), sec. 9.4.
"""

import numpy as np
import pytest

control = pytest.importorskip("control")

from loopkit.margins import loop_margins
from loopkit.rational import TWO_PI, Rational

F = np.geomspace(1.0, 1e7, 1000)


def _loop(k, zeros_hz, poles_hz, origin_poles=1):
    """k * prod(1 + s/wz) / (s^n prod(1 + s/wp)) built from factors (roots in Hz, left half plane)."""
    num = [(1.0, 1.0 / (TWO_PI * z)) for z in zeros_hz]
    den = [(0.0, 1.0)] * origin_poles + [(1.0, 1.0 / (TWO_PI * p)) for p in poles_hz]
    return Rational.from_factors(k, num, den)


def _resonant(f0, q):
    w0 = TWO_PI * f0
    r = np.roots([1 / w0**2, 1 / (q * w0), 1])
    return [(1.0, -1.0 / x) for x in r]


CASES = [
    # (name, loop) — loop shapes typical of voltage-mode converters
    ("integrator-lead", _loop(2e4, [2e3], [40e3, 200e3])),
    ("type3-like", Rational.from_factors(3e5, [(1, 1 / (TWO_PI * 3e3))] * 2,
                                         [(0, 1)] + [(1, 1 / (TWO_PI * 60e3))] * 2 + _resonant(5e3, 4))),
    ("rhp-zero", Rational.from_factors(800.0, [(1, -1 / (TWO_PI * 60e3))],
                                       [(0, 1), (1, 1 / (TWO_PI * 500e3))] + _resonant(2e3, 2))),
    ("low-pm", _loop(5e4, [], [3e3, 30e3])),
]


@pytest.mark.parametrize("name,loop", CASES, ids=[c[0] for c in CASES])
def test_margins_equal_python_control(name, loop):
    m = loop_margins(loop, F)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(loop.to_control(0))
    assert m.n_crossovers[0] == 1
    np.testing.assert_allclose(m.fc_hz[0], wgc / TWO_PI, rtol=1e-6)
    np.testing.assert_allclose(m.pm_deg[0], pm, atol=1e-4)
    if np.isfinite(gm) and gm > 1:
        np.testing.assert_allclose(m.f180_hz[0], wpc / TWO_PI, rtol=1e-6)
        np.testing.assert_allclose(m.gm_db[0], 20 * np.log10(gm), atol=1e-5)
    cl = control.feedback(loop.to_control(0), 1).poles()
    assert m.stable[0] == bool(np.all(cl.real < 0))


def test_margins_do_not_depend_on_grid():
    loop = CASES[1][1]
    coarse = loop_margins(loop, np.geomspace(1, 1e7, 60))
    fine = loop_margins(loop, F)
    np.testing.assert_allclose(coarse.fc_hz, fine.fc_hz, rtol=1e-9)
    np.testing.assert_allclose(coarse.pm_deg, fine.pm_deg, atol=1e-7)


def test_delay_margin_is_pm_over_wc():
    loop = CASES[0][1]
    m = loop_margins(loop, F)
    np.testing.assert_allclose(m.delay_margin_s[0], np.radians(m.pm_deg[0]) / (TWO_PI * m.fc_hz[0]), rtol=1e-12)
    # a pure delay equal to the delay margin brings the phase margin to zero
    delayed = Rational(loop.gain, loop.num, loop.den, np.array([m.delay_margin_s[0]]))
    md = loop_margins(delayed, F)
    assert abs(md.pm_deg[0]) < 1e-6


def test_unstable_loop_is_not_called_stable():
    # three poles with high gain: Routh-Hurwitz says unstable for k > 8 (poles at -1 rad/s each, scaled)
    p = 1e3
    loop = Rational.from_factors(10.0, [], [(1, 1 / (TWO_PI * p))] * 3)  # k = 10 > 8
    m = loop_margins(loop, F)
    assert not m.stable[0]
    stable = loop_margins(Rational.from_factors(7.0, [], [(1, 1 / (TWO_PI * p))] * 3), F)
    assert stable.stable[0]
    assert stable.gm_db[0] > 0


def test_conditionally_stable_loop_is_flagged():
    # An integrator and a double pole at 10 Hz take the phase below -180 deg near
    # 100 Hz where |T| >> 1; a double zero at 1 kHz brings it back before crossover
    # near 10 kHz.  Stable as designed, unstable if the gain falls enough.
    shape = Rational.from_factors(1.0, [(1, 1 / (TWO_PI * 1e3))] * 2,
                                  [(0, 1)] + [(1, 1 / (TWO_PI * 10.0))] * 2 + [(1, 1 / (TWO_PI * 2e5))] * 2)
    k = 1.0 / abs(shape.response([1e4])[0, 0])
    loop = shape * k
    m = loop_margins(loop, np.geomspace(0.1, 1e7, 2000))
    cl = control.feedback(loop.to_control(0), 1).poles()
    assert bool(np.all(cl.real < 0)) and m.stable[0]
    assert m.conditional[0]
    # lowering the gain by more than gm_low_db makes it unstable (python-control's poles)
    weaker = loop * (10 ** (-(m.gm_low_db[0] + 1.0) / 20))
    cl_weak = control.feedback(weaker.to_control(0), 1).poles()
    assert np.any(cl_weak.real > 0)
    assert not loop_margins(weaker, np.geomspace(0.1, 1e7, 2000)).stable[0]


def test_vectorised_over_corners_equals_one_by_one():
    loops = Rational.stack([c[1] for c in CASES])
    m = loop_margins(loops, F)
    for i, (_, loop) in enumerate(CASES):
        mi = loop_margins(loop, F)
        np.testing.assert_allclose(m.fc_hz[i], mi.fc_hz[0], rtol=1e-12)
        np.testing.assert_allclose(m.pm_deg[i], mi.pm_deg[0], atol=1e-9)


def test_two_crossings_inside_one_grid_step_are_found():
    # A Q = 30 resonance whose peak just clears 0 dB: it crosses up and down within
    # a fraction of a percent in frequency, far closer than a 60-point grid step.
    base = Rational.from_factors(1.0, [(1, 1 / (TWO_PI * 500.0))],
                                 [(0, 1), (1, 1 / (TWO_PI * 50e3))] + _resonant(10e3, 30.0))
    peak = max(abs(base.response(np.geomspace(9e3, 11e3, 200001))[0]))
    loop = base * (1.003 / peak)
    coarse = loop_margins(loop, np.geomspace(1, 1e6, 60))
    fine_grid = np.geomspace(1, 1e6, 2_000_001)
    mag = np.log(np.abs(loop.response(fine_grid)[0]))
    n_true = int(np.sum(np.sign(mag[:-1]) != np.sign(mag[1:])))
    assert n_true == 3
    assert coarse.n_crossovers[0] == n_true
    cl = control.feedback(loop.to_control(0), 1).poles()
    assert coarse.stable[0] == bool(np.all(cl.real < 0))
