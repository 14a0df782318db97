"""loopkit.rational.Rational against python-control 0.10.2 and numpy.

Outside references: python-control (TransferFunction evaluation,
frequency_response, poles, zeros, feedback, dcgain) and numpy (polyval,
polynomial roots via numpy.roots, np.unwrap of np.angle).  Systems are random
(hypothesis): real and complex-pair poles and zeros in both half planes, roots
at the origin, padding, negative gains, several corners at once.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from loopkit.rational import TWO_PI, Rational

control = pytest.importorskip("control")

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
F_HZ = np.logspace(0, 7, 400)


@st.composite
def root_sets(draw, max_order=5, rhp=True):
    """Roots in Hz (s-plane root / 2 pi): complex pairs, real, optional origin roots."""
    roots = []
    for _ in range(draw(st.integers(0, max_order // 2))):
        f = 10 ** draw(st.floats(1.0, 6.0))
        zeta = draw(st.floats(0.02, 0.95))
        sign = -1.0 if not rhp or draw(st.booleans()) else 1.0
        root = sign * zeta * f + 1j * f * np.sqrt(1 - zeta**2)
        roots += [root, np.conj(root)]
    for _ in range(draw(st.integers(0, max_order - len(roots)))):
        f = 10 ** draw(st.floats(1.0, 6.0))
        roots.append(-f if not rhp or draw(st.booleans()) else f)
    return roots


@st.composite
def rationals(draw, n_corners=None, stable=False):
    """(Rational, list of (gain, zeros_hz, poles_hz) per corner)."""
    n = n_corners or draw(st.integers(1, 4))
    origin_z = draw(st.integers(0, 1))
    origin_p = draw(st.integers(0, 1)) if not origin_z else 0
    rows = []
    for _ in range(n):
        gain = draw(st.sampled_from([-1.0, 1.0])) * 10 ** draw(st.floats(-3, 3))
        zeros = draw(root_sets(4)) + [0.0] * origin_z
        poles = draw(root_sets(5, rhp=not stable)) + [0.0] * origin_p
        if not poles:
            poles = [-(10 ** draw(st.floats(1.0, 6.0)))]
        rows.append((gain, zeros, poles))
    kz = max(len(r[1]) for r in rows)
    kp = max(len(r[2]) for r in rows)
    z = np.full((n, kz), np.inf, dtype=complex)
    p = np.full((n, kp), np.inf, dtype=complex)
    for i, (_, zr, pr) in enumerate(rows):
        z[i, : len(zr)] = zr
        p[i, : len(pr)] = pr
    gains = np.array([r[0] for r in rows])
    return Rational.from_roots_hz(gains, z, p), rows


def _direct(gain, zeros, poles, f_hz):
    """gain * prod(1 - s/z) / prod(1 - s/p), with s for roots at 0 (the documented form)."""
    s = 1j * TWO_PI * f_hz
    h = np.full(s.shape, gain, dtype=complex)
    for z in zeros:
        h *= s if z == 0 else 1 - s / (TWO_PI * z)
    for p in poles:
        h /= s if p == 0 else 1 - s / (TWO_PI * p)
    return h


def _match_roots(a, b, rtol):
    """Every root of a has a distinct partner in b within rtol of its magnitude (or atol at 0)."""
    a, b = list(np.asarray(a)), list(np.asarray(b))
    assert len(a) == len(b), (a, b)
    scale = max([abs(x) for x in a + b] + [1.0])
    for x in a:
        d = [abs(x - y) for y in b]
        j = int(np.argmin(d))
        assert d[j] <= rtol * max(abs(x), 1e-6 * scale), (x, b)
        b.pop(j)


@SETTINGS
@given(rationals())
def test_response_matches_the_factored_form(sys_rows):
    h, rows = sys_rows
    resp = h.response(F_HZ)
    assert resp.shape == (len(rows), F_HZ.size)
    for k, (gain, zeros, poles) in enumerate(rows):
        np.testing.assert_allclose(resp[k], _direct(gain, zeros, poles, F_HZ), rtol=1e-12)


@SETTINGS
@given(rationals())
def test_to_control_frequency_response(sys_rows):
    """python-control's evaluation of to_control() equals response() to 1e-9 relative."""
    h, rows = sys_rows
    resp = h.response(F_HZ)
    w = TWO_PI * F_HZ
    for k in range(len(rows)):
        tf = h.to_control(k)
        assert isinstance(tf, control.TransferFunction)
        np.testing.assert_allclose(tf(1j * w), resp[k], rtol=1e-9)
        fr = control.frequency_response(tf, w)
        np.testing.assert_allclose(fr.omega, w)
        np.testing.assert_allclose(fr.magnitude * np.exp(1j * fr.phase), resp[k], rtol=1e-9)


# scipy (inside control.zeros) warns when the top numerator coefficient is below 1e-14 in
# absolute terms, which s in rad/s makes usual (e.g. 1/(2 pi 1 MHz)^2); it is not an error
@pytest.mark.filterwarnings("ignore:Badly conditioned filter coefficients")
@SETTINGS
@given(rationals())
def test_poles_and_zeros_match_control(sys_rows):
    h, rows = sys_rows
    for k in range(len(rows)):
        tf = h.to_control(k)
        p = h.poles_hz()[k]
        z = h.zeros_hz()[k]
        _match_roots(p[np.isfinite(p)] * TWO_PI, control.poles(tf), rtol=1e-6)
        _match_roots(z[np.isfinite(z)] * TWO_PI, control.zeros(tf), rtol=1e-6)
        # and the roots given: poles_hz returns the s-plane roots / 2 pi
        _match_roots(p[np.isfinite(p)], np.asarray(rows[k][2], complex), rtol=1e-12)


@SETTINGS
@given(rationals())
def test_dc_gain_matches_control(sys_rows):
    h, rows = sys_rows
    for k, (gain, zeros, poles) in enumerate(rows):
        dc = control.dcgain(h.to_control(k))
        if 0.0 in zeros:
            assert h.dc_gain()[k] == 0.0 and abs(dc) < 1e-300 + 1e-12 * abs(gain)
        elif 0.0 in poles:
            assert np.isinf(h.dc_gain()[k]) and np.sign(h.dc_gain()[k]) == np.sign(gain)
        else:
            assert h.dc_gain()[k] == pytest.approx(float(np.real(dc)), rel=1e-9)
            assert h.dc_gain()[k] == pytest.approx(gain, rel=1e-12)


@SETTINGS
@given(rationals())
def test_phase_is_continuous_and_equals_unwrapped_angle(sys_rows):
    """phase_deg equals np.unwrap(np.angle(response)) up to one constant multiple of 360 deg,
    and python-control's phase up to multiples of 360 deg."""
    h, rows = sys_rows
    f = np.logspace(0, 7, 20000)  # dense enough for np.unwrap near lightly damped pairs
    ph = h.phase_deg(f)
    resp = h.response(f)
    for k, (gain, zeros, poles) in enumerate(rows):
        unwrapped = np.degrees(np.unwrap(np.angle(resp[k])))
        offset = ph[k] - unwrapped
        turns = offset / 360.0
        assert np.allclose(turns, np.round(turns[0]), atol=1e-6), "phase differs by more than a fixed 360 deg"
        # low-frequency convention: 0 (gain > 0) or -180 (gain < 0), +90 per origin zero, -90 per origin pole
        expected0 = (-180.0 if gain < 0 else 0.0) + 90.0 * zeros.count(0.0) - 90.0 * poles.count(0.0)
        low = h.phase_deg(np.array([1e-6]))[k, 0]
        assert low == pytest.approx(expected0, abs=1e-3)
        fr = control.frequency_response(h.to_control(k), TWO_PI * f[::100])
        d = (ph[k, ::100] - np.degrees(fr.phase)) / 360.0
        np.testing.assert_allclose(d, np.round(d), atol=1e-6)


def test_phase_of_rhp_zero_and_integrator():
    """Known cases: an RHP zero at 1 kHz gives -45 deg at 1 kHz and -> -90 deg (never +270);
    an integrator -90 deg at every frequency; inverting gain -180 deg."""
    rhp = Rational.from_roots_hz(1.0, [1e3], [])
    np.testing.assert_allclose(rhp.phase_deg(np.array([1e3, 1e7]))[0], [-45.0, -90.0], atol=0.01)
    integ = Rational.from_roots_hz(1.0, [], [0.0])
    np.testing.assert_allclose(integ.phase_deg(np.array([1.0, 1e6]))[0], [-90.0, -90.0], atol=1e-12)
    np.testing.assert_allclose(np.abs(integ.response(np.array([1.0]))[0]), 1 / TWO_PI, rtol=1e-15)
    inv = Rational.constant(-2.0)
    assert inv.phase_deg(np.array([10.0]))[0, 0] == -180.0


@SETTINGS
@given(rationals(stable=True))
def test_closed_loop_poles_match_control_feedback(sys_rows):
    """Roots of 1 + H = 0 equal the poles of control.feedback(H, 1) (unity negative feedback)."""
    h, rows = sys_rows
    cl = h.closed_loop_poles_hz()
    for k in range(len(rows)):
        ref = control.feedback(h.to_control(k), 1).poles()
        mine = cl[k][np.isfinite(cl[k])] * TWO_PI
        _match_roots(mine, ref, rtol=1e-6)


@st.composite
def polynomials(draw, max_order=5, origin=True):
    """Ascending real coefficients of gain * prod(s - root) with roots in rad/s."""
    roots = np.asarray(draw(root_sets(max_order)), complex) * TWO_PI
    n0 = draw(st.integers(0, 1)) if origin else 0
    coeffs = np.poly(np.concatenate([roots, np.zeros(n0)])).real[::-1] if (roots.size or n0) else np.array([1.0])
    return coeffs * draw(st.floats(0.1, 10.0)) * draw(st.sampled_from([-1.0, 1.0]))


@SETTINGS
@given(polynomials(), polynomials(origin=False))
def test_from_polys_round_trip(num, den):
    """from_polys then polys() gives back the same rational function (up to a common scale),
    and its response equals numpy.polyval of the coefficients."""
    h = Rational.from_polys(num, den)
    n2, d2 = h.polys()
    scale = d2[0, np.argmax(d2[0] != 0)] / den[np.argmax(den != 0)]
    np.testing.assert_allclose(n2[0, : num.size], num * scale, rtol=1e-8, atol=1e-12 * np.max(np.abs(num * scale)))
    np.testing.assert_allclose(d2[0, : den.size], den * scale, rtol=1e-8, atol=1e-12 * np.max(np.abs(den * scale)))
    assert np.all(n2[0, num.size :] == 0) and np.all(d2[0, den.size :] == 0)
    s = 1j * TWO_PI * F_HZ
    expected = np.polyval(num[::-1], s) / np.polyval(den[::-1], s)
    np.testing.assert_allclose(h.response(F_HZ)[0], expected, rtol=1e-9)
    # and python-control agrees with both
    np.testing.assert_allclose(control.tf(num[::-1], den[::-1])(s), expected, rtol=1e-9)
    np.testing.assert_allclose(h.to_control()(s), expected, rtol=1e-9)


def test_from_polys_many_rows_one_call():
    """Rows of different degree (trailing zeros) and origin roots in one call."""
    num = np.array([[2.0, 3.0, 0.0], [0.0, 1.0, 1e-3], [5.0, 0.0, 0.0]])
    den = np.array([[1.0, 1e-4, 1e-9], [1.0, 2e-5, 0.0], [1.0, 1e-3, 2e-8]])
    h = Rational.from_polys(num, den)
    s = 1j * TWO_PI * F_HZ
    for k in range(3):
        expected = np.polyval(num[k, ::-1], s) / np.polyval(den[k, ::-1], s)
        np.testing.assert_allclose(h.response(F_HZ)[k], expected, rtol=1e-12)
    assert np.sum(np.isfinite(h.zeros_hz()[0])) == 1 and np.sum(np.isfinite(h.poles_hz()[1])) == 1
    np.testing.assert_allclose(
        np.sort(h.zeros_hz()[1][np.isfinite(h.zeros_hz()[1])].real),
        np.sort(np.roots([1e-3, 1.0, 0.0]).real) / TWO_PI,
        rtol=1e-12,
        atol=0,
    )


@SETTINGS
@given(rationals(n_corners=3), rationals(n_corners=3))
def test_algebra_matches_control(a_rows, b_rows):
    """Products, quotients and take() agree with python-control's series connection."""
    a, _ = a_rows
    b, _ = b_rows
    w = TWO_PI * F_HZ
    prod = (a * b).response(F_HZ)
    quot = (a / b).response(F_HZ)
    for k in range(3):
        ta, tb = a.to_control(k), b.to_control(k)
        np.testing.assert_allclose(prod[k], (ta * tb)(1j * w), rtol=1e-8)
        np.testing.assert_allclose(quot[k], (ta / tb)(1j * w), rtol=1e-8)
        np.testing.assert_allclose(a.take(k).response(F_HZ)[0], a.response(F_HZ)[k], rtol=0)


# ---------------------------------------------------------------------------- sums and feedback
def _assert_response_close(mine, ref, rtol, terms=()):
    """Relative agreement, measured against the larger of the two magnitudes at each frequency, or for a
    sum against the sum of its terms' magnitudes where that is larger (a sum that cancels to zero at some
    frequency, e.g. a zero on the imaginary axis, is known only to rounding of its terms there).  Where the
    reference is infinite (the grid hits a pole on the imaginary axis, e.g. a closed loop of two all-pass
    paths with poles at +-j 2 pi 10 Hz) loopkit's response must be infinite or huge too."""
    mine, ref = np.asarray(mine), np.asarray(ref)
    pole = ~np.isfinite(ref)  # a frequency exactly on an imaginary-axis pole: both must be infinite there
    assert np.all(~np.isfinite(mine[pole]) | (np.abs(mine[pole]) > 1e12)), mine[pole]
    mine, ref = mine[~pole], ref[~pole]
    terms = tuple(np.asarray(t)[~pole] for t in terms)
    scale = np.maximum(np.abs(mine), np.abs(ref))
    rounding = 1e-13 * sum((np.abs(t) for t in terms), np.zeros(scale.shape))  # a few hundred eps of the terms
    err = np.abs(mine - ref)
    assert np.all(err <= rtol * scale + rounding + 1e-300), np.max(err / scale)


@SETTINGS
@given(rationals(n_corners=3), rationals(n_corners=3))
def test_sum_matches_control_parallel(a_rows, b_rows):
    """a + b, a - b and Rational.sum equal python-control's parallel connection (control.parallel)."""
    a, _ = a_rows
    b, _ = b_rows
    w = TWO_PI * F_HZ
    total = (a + b).response(F_HZ)
    diff = (a - b).response(F_HZ)
    three = Rational.sum([a, b, a]).response(F_HZ)
    ra, rb = a.response(F_HZ), b.response(F_HZ)
    for k in range(3):
        ta, tb = a.to_control(k), b.to_control(k)
        terms = (ra[k], rb[k])
        _assert_response_close(total[k], control.parallel(ta, tb)(1j * w), 1e-7, terms)
        _assert_response_close(diff[k], control.parallel(ta, -tb)(1j * w), 1e-7, terms)
        _assert_response_close(three[k], control.parallel(ta, tb, ta)(1j * w), 1e-7, terms)


@SETTINGS
@given(rationals(n_corners=2), rationals(n_corners=2))
def test_sum_over_a_shared_denominator_keeps_its_poles_once(a_rows, b_rows):
    """Two numerators over one denominator (Gid and Gvd of one plant): the sum has that
    denominator once, not squared, and still equals control.parallel."""
    a, _ = a_rows
    b, _ = b_rows
    b_same_den = Rational(b.gain, b.num, a.den, b.delay_s)  # b's zeros over a's poles
    total = a + b_same_den
    assert np.sum(np.isfinite(total.poles_hz())) == np.sum(np.isfinite(a.poles_hz()))
    w = TWO_PI * F_HZ
    terms = (a.response(F_HZ), b_same_den.response(F_HZ))
    for k in range(2):
        ref = control.parallel(a.to_control(k), b_same_den.to_control(k))
        # a sum can cancel to zero on the grid (e.g. -1/(1+s/w) - (s-z)^2 (s-z*)^2/(1+s/w) at 10 Hz exactly)
        _assert_response_close(total.response(F_HZ)[k], ref(1j * w), 1e-7, (terms[0][k], terms[1][k]))


def test_sum_with_constants_and_cancelling_terms():
    """1 + H (control.parallel with a static gain), a constant on the left, and H - H = 0."""
    h = Rational.from_roots_hz([2.0, -3.0], [[-1e3]] * 2, [[-10.0, -1e4]] * 2)
    w = TWO_PI * F_HZ
    for k in range(2):
        ref = control.parallel(control.tf([1.0], [1.0]), h.to_control(k))
        _assert_response_close((1.0 + h).response(F_HZ)[k], ref(1j * w), 1e-9)
        _assert_response_close((h + 1.0).response(F_HZ)[k], ref(1j * w), 1e-9)
    zero = h - h
    np.testing.assert_array_equal(zero.response(F_HZ), 0.0)
    assert sum([h, h]).response(F_HZ) == pytest.approx(2 * h.response(F_HZ), rel=1e-12)  # builtin sum from 0
    with pytest.raises(ValueError):
        Rational.sum([])
    delayed = Rational(h.gain, h.num, h.den, np.array([1e-6, 1e-6]))
    with pytest.raises(ValueError):
        h + delayed


@pytest.mark.filterwarnings("ignore:Badly conditioned filter coefficients")
@SETTINGS
@given(rationals(n_corners=3), rationals(n_corners=3), st.sampled_from([-1, 1]))
def test_feedback_matches_control_feedback(g_rows, h_rows, sign):
    """G.feedback(H, sign) equals control.feedback(G, H, sign): response and closed-loop poles."""
    g, _ = g_rows
    h, _ = h_rows
    cl = g.feedback(h, sign)
    w = TWO_PI * F_HZ
    resp = cl.response(F_HZ)
    for k in range(3):
        ref = control.feedback(g.to_control(k), h.to_control(k), sign=sign)
        _assert_response_close(resp[k], ref(1j * w), 1e-6)
        p = cl.poles_hz()[k]
        _match_roots(p[np.isfinite(p)] * TWO_PI, ref.poles(), rtol=1e-5)


def test_feedback_with_a_constant_path_and_bad_arguments():
    """Unity and scalar feedback against control.feedback; a delay or a bad sign is refused."""
    g = Rational.from_roots_hz(1e3, [], [0.0, -2e3])
    w = TWO_PI * F_HZ
    for path in (1.0, 0.25):
        ref = control.feedback(g.to_control(0), path)
        _assert_response_close(g.feedback(path).response(F_HZ)[0], ref(1j * w), 1e-9)
    with pytest.raises(ValueError):
        g.feedback(1.0, sign=0)
    with pytest.raises(ValueError):
        Rational(g.gain, g.num, g.den, np.array([1e-6])).feedback(1.0)


def test_cancel_removes_exactly_repeated_factors_like_control_minreal():
    """(G * P) / P with the same factors: cancel() leaves G's poles and zeros (as control.minreal does)
    and the same response; factors that differ beyond rounding are left alone."""
    g = Rational.from_roots_hz([3.0, -2.0], [[-5e3], [2e4]], [[-100.0, -4e4], [-300.0, -4e4]])
    p = Rational.from_roots_hz(1.0, [[-700.0 + 900j, -700.0 - 900j]] * 2, [[-50.0]] * 2)
    both = (g * p) / p
    minimal = both.cancel()
    w = TWO_PI * F_HZ
    for k in range(2):
        ref = control.minreal(both.to_control(k), verbose=False)
        assert np.sum(np.isfinite(minimal.poles_hz()[k])) == len(ref.poles()) == 2
        assert np.sum(np.isfinite(minimal.zeros_hz()[k])) == len(ref.zeros()) == 1
        _assert_response_close(minimal.response(F_HZ)[k], ref(1j * w), 1e-9)
    near = Rational.from_roots_hz(1.0, [-100.0 * (1 + 1e-6)], [-100.0])
    assert np.sum(np.isfinite(near.cancel().poles_hz())) == 1
