"""Steps of the sampled loop (loopkit/digital_step.py): load, input and set-point steps of digital designs.

Outside references:
- a brute-force simulation written here (``_brute``): the averaged plant realised by
  ``scipy.signal.tf2ss`` path by path, integrated event by event with ``scipy.linalg.expm`` of the
  augmented matrix (the input and its slope as states: C. Van Loan, "Computing integrals involving
  the matrix exponential", IEEE Trans. Automatic Control 23(3), 1978), each duty change applied as
  the impulse of the moved PWM edge (area Ts u / N_pwm) after the loop delay, as it happens, the controller's difference equation run literally on the samples
  (``scipy.signal.lfilter``'s recursion); the sampled-data loop of G. F. Franklin, J. D. Powell,
  M. L. Workman, Digital Control of Dynamic Systems, 3rd ed., 1998, ch. 4;
- scipy ``cont2discrete(method="impulse")`` of the continuous chain (its feedthrough dropped: the edge's
  impulse at the sample is seen by the next one), times z^-N for a whole-sample delay, closed with
  python-control 0.10 ``feedback`` and run by ``forced_response``;
- the analog limit: with fs far above fc the sampled loop's step approaches that of the analog loop
  whose controller is the inverse bilinear (Tustin) map of C(z) (FPW ch. 6: the Tustin equivalent
  matches the analog controller for frequencies well below fs/2; from memory), run by python-control
  ``forced_response`` on the continuous closed loop.
"""

import heapq
from dataclasses import replace

import numpy as np
import pytest
from scipy.linalg import expm
from scipy.signal import tf2ss

from loopkit.cli import main
from loopkit.digital_loop import closed_loop_step
from loopkit.digital_step import digital_step_response, hold_controller, plant_paths, simulate_sampled
from loopkit.errors import DesignError
from loopkit.loop import LoopSession
from loopkit.timeresponse import step_response
from loopkit.units import format_value
from tests.reference.samples import sample_design, sample_result

control = pytest.importorskip("control")

SAMPLES = ["buck_dsp_5v", "inverting_mcu_minus12v"]


_design, _result = sample_design, sample_result


def _desc(r, k):
    num, den = r.take(k).polys()
    return np.trim_zeros(num[0], "b")[::-1], np.trim_zeros(den[0], "b")[::-1]


# ---------------------------------------------------------------------------- the brute-force reference
def _brute(paths, k, b, a, ts, tau, n_pwm, amp, rise, t_out, n_samples):
    """Outputs (v, iL, y, duty deviation) of corner ``k`` at times ``t_out`` (left limits), event by event.

    The disturbance (load or input) arrives just after the sample at t = 0 (a step) or ramps from t = 0;
    a set point is read from the sample at t = 0.  The duty u_k / n_pwm is written at k Ts + tau, where the
    moved edge kicks the plant's duty paths by Ts B u_k / n_pwm (the duty row reports the value written).
    """
    blocks = []  # (A, B, C, D, source, output row)
    srcs = [("d", paths.duty)] + ([("w", paths.disturbance)] if paths.disturbance is not None else [])
    for src, tfs in srcs:
        for row, tf in enumerate(tfs):
            am, bm, cm, dm = tf2ss(*_desc(tf, k))
            blocks.append((am, bm[:, 0], cm[0], float(dm[0, 0]), src, row))
    m = sum(bl[0].shape[0] for bl in blocks)
    big = np.zeros((m + 3, m + 3))  # states: x, d, w, slope
    iD, iW, iS = m, m + 1, m + 2
    cout = np.zeros((3, m + 3))
    kick_d = np.zeros(m + 3)
    j = 0
    for am, bm, cm, dm, src, row in blocks:
        n = am.shape[0]
        big[j:j + n, j:j + n] = am
        if src == "d":
            kick_d[j:j + n] = bm
        else:
            big[j:j + n, iW] = bm
            cout[row, iW] += dm
        cout[row, j:j + n] = cm
        j += n
    big[iW, iS] = 1.0
    cache = {}

    def flow(z, h):
        if h <= 0:
            return z
        key = round(h, 18)
        if key not in cache:
            cache[key] = expm(big * h)
        return cache[key] @ z

    disturbance = paths.disturbance is not None
    ref = paths.ref_codes_per_v[k]
    z = np.zeros(m + 3)
    if rise > 0:
        z[iS] = amp / rise
    elif not disturbance:
        z[iW] = amp
    # events: (time, order, kind, value); order: read outputs, sample, kick, duty update, ramp end
    ev = [(t, 0, "out", i) for i, t in enumerate(t_out)] + [(i * ts, 1, "sample", i) for i in range(n_samples)]
    if disturbance and rise == 0:
        ev.append((0.0, 2, "kick", None))
    if rise > 0:
        ev.append((rise, 3, "ramp-end", None))
    heapq.heapify(ev)
    out = np.zeros((4, len(t_out)))
    e_hist, u_hist = [], []
    t = 0.0
    while ev:
        te, _, what, val = heapq.heappop(ev)
        z = flow(z, te - t)
        t = te
        if what == "out":
            out[:3, val] = cout @ z
            out[3, val] = z[iD]
        elif what == "sample":
            y = cout[2] @ z
            e_hist.append((ref * z[iW] if not disturbance else 0.0) - y)
            acc = sum(b[i] * e_hist[-1 - i] for i in range(len(b)) if len(e_hist) - 1 - i >= 0)
            acc -= sum(a[i] * u_hist[-i] for i in range(1, len(a)) if len(u_hist) - i >= 0)
            u_hist.append(acc / a[0])
            heapq.heappush(ev, (te + tau, 3, "update", u_hist[-1]))
        elif what == "update":
            z[iD] = val / n_pwm
            z = z + ts * kick_d * val / n_pwm
        elif what == "kick":
            z[iW] = amp
        else:
            z[iS] = 0.0
    return out


CASES = [("buck_dsp_5v", "load", 1.0, 0.7e-6), ("buck_dsp_5v", "line", 3.0, 0.0),
         ("buck_dsp_5v", "reference", 0.02, 0.0), ("inverting_mcu_minus12v", "load", 0.5, 0.0),
         ("inverting_mcu_minus12v", "line", -4.0, 9e-6), ("inverting_mcu_minus12v", "reference", -0.1, 5e-6)]


@pytest.mark.parametrize("name,kind,amp,rise", CASES)
def test_step_equals_brute_force_between_samples(name, kind, amp, rise):
    """Output, inductor current, ADC reading and duty against the literal event-by-event simulation, at 8
    points per sample period over 250 periods, at the first and last corner: within 1e-6 of the peak."""
    res = _result(name)
    dig = res.digital
    paths = plant_paths(res, kind)
    sim = simulate_sampled(paths, dig.b, dig.a, dig.ts_s, dig.delay_s, dig.pwm_steps, amp, rise, 250 * dig.ts_s)
    npts = 250 * 8
    t = sim["t_s"][:npts]
    np.testing.assert_allclose(np.diff(t), dig.ts_s / 8, rtol=1e-9)
    for k in (0, res.stage.n_corners - 1):
        ref = _brute(paths, k, dig.b, dig.a, dig.ts_s, dig.delay_s[k], dig.pwm_steps, amp, rise, t, 251)
        for row, key in enumerate(("v", "i", "y", "duty")):
            scale = np.max(np.abs(ref[row]))
            assert scale > 0
            np.testing.assert_allclose(sim[key][k, :npts], ref[row], rtol=0, atol=1e-6 * scale, err_msg=key)


@pytest.mark.parametrize("n_whole", [1, 2])
def test_whole_sample_delay_equals_python_control(n_whole):
    """A set-point step with the loop delay a whole number of samples: the ADC readings at the samples
    against scipy's impulse-invariant equivalent (edge model, feedthrough dropped) times z^-N, closed with
    python-control's feedback."""
    from scipy.signal import cont2discrete
    res = _result("buck_dsp_5v")
    dig = res.digital
    paths = plant_paths(res, "reference")
    n = 200
    sim = simulate_sampled(paths, dig.b, dig.a, dig.ts_s, n_whole * dig.ts_s, dig.pwm_steps, 0.03, 0.0,
                           n * dig.ts_s)
    c = control.tf(dig.b, dig.a, dig.ts_s)
    for k in (0, res.stage.n_corners - 1):
        num, den = _desc(paths.duty[2], k)
        am, bm, cm, _ = tf2ss(num / dig.pwm_steps, den)
        ad, bd, cd, _, _ = cont2discrete((am, bm, cm, np.zeros((1, 1))), dig.ts_s, method="impulse")
        pz = control.ss(ad, bd, cd, 0.0, dig.ts_s)
        delay = control.tf([1.0], [1.0] + [0.0] * n_whole, dig.ts_s)
        cl = control.feedback(c * pz * delay, 1)
        r = np.full(n, paths.ref_codes_per_v[k] * 0.03)
        y_ref = control.forced_response(cl, np.arange(n) * dig.ts_s, r).outputs
        y = sim["y_samples"][k, :n]
        np.testing.assert_allclose(y, y_ref, rtol=0, atol=1e-7 * np.max(np.abs(y_ref)))


@pytest.mark.parametrize("name", SAMPLES)
def test_fractional_delay_samples_equal_z_domain_closed_loop(name):
    """At the samples, the time simulation equals the closed loop in z with the exact fractional-delay
    plant (loopkit.digital_loop.closed_loop_step, ``y/r = Tu C / (1 + Tu C)``, lfilter)."""
    res = _result(name)
    dig = res.digital
    paths = plant_paths(res, "reference")
    k = res.design_corner
    n = 300
    volts_per_code = 1.0 / paths.ref_codes_per_v[k]
    sim = simulate_sampled(paths, dig.b, dig.a, dig.ts_s, dig.delay_s, dig.pwm_steps, volts_per_code, 0.0,
                           n * dig.ts_s)
    y_z = closed_loop_step(res, k, n, "reference")
    np.testing.assert_allclose(sim["y_samples"][k, :n], y_z, rtol=0, atol=1e-6 * np.max(np.abs(y_z)))


def _inverse_tustin(b, a, ts):
    """C(s) from C(z) by z = (1 + s Ts/2) / (1 - s Ts/2) (FPW ch. 6), as descending (num, den)."""
    P = np.polynomial.polynomial
    bz, az = np.asarray(b)[::-1], np.asarray(a)[::-1]  # ascending in z (same length)
    order = max(bz.size, az.size) - 1
    plus, minus = np.array([1.0, ts / 2]), np.array([1.0, -ts / 2])

    def sub(p):
        out = np.zeros(1)
        for i, ci in enumerate(p):
            out = P.polyadd(out, ci * P.polymul(P.polypow(plus, i), P.polypow(minus, order - i)))
        return out

    return sub(bz)[::-1], sub(az)[::-1]


def _analog_peak(res, amp):
    """Load-step peak of the analog loop with the inverse-Tustin controller, per corner (python-control)."""
    paths = plant_paths(res, "load")
    dig = res.digital
    cn, cd = _inverse_tustin(dig.b, dig.a, dig.ts_s)
    cs = control.tf(cn, cd) / dig.pwm_steps
    peaks = []
    for k in range(res.stage.n_corners):
        gw = control.tf(*_desc(paths.disturbance[0], k))
        gyd = control.tf(*_desc(paths.duty[2], k))
        cl = control.minreal(gw * control.feedback(1, cs * gyd), verbose=False)
        t = np.linspace(0, 40 / res.margins.fc_hz[k], 20000)
        v = control.forced_response(cl, t, np.full(t.size, amp)).outputs
        peaks.append(v[np.argmax(np.abs(v))])
    return np.array(peaks)


@pytest.mark.slow
def test_analog_limit_at_high_sampling_rate():
    """The buck sample at fsw = 500 kHz (fs/fc = 25) and at 5 MHz (fs/fc = 250; the computation delay scaled
    with Ts, the averaged CCM plant unchanged): the sampled loop's load-step peak against the analog loop
    with the inverse-Tustin controller, per corner.  At fs/fc = 250 within 4 %; the difference falls about
    as Ts (the hold's Ts/2 and the loop delay are the phase lag the analog loop lacks, FPW ch. 4), so by more
    than 5 times for the 10 times faster sampling.  Measured: 26 % and 3.0 %."""
    design = _design("buck_dsp_5v")
    diffs = []
    for fsw in (500e3, 5e6):
        scaled = replace(design, stage=replace(design.stage, fsw=fsw),
                         digital=replace(design.digital, computation_delay=design.digital.computation_delay * 500e3 / fsw))
        res = LoopSession(scaled).run()
        assert res.feasible and not np.any(res.stage.dcm)
        digital = step_response(res, "load", 1.0).peak_v
        analog = _analog_peak(res, 1.0)
        assert np.all(np.sign(digital) == np.sign(analog))
        diffs.append(np.max(np.abs(digital / analog - 1)))
    assert diffs[1] < 0.04, diffs
    assert diffs[0] > 5 * diffs[1], diffs


# ---------------------------------------------------------------------------- the response and its figures
@pytest.mark.parametrize("name", SAMPLES)
def test_response_figures_and_final_values(name):
    """Same StepResponse as the analog steps: the final value is where the waveform ends (an integrator in
    C(z): a load step leaves no dc error; a set-point step moves the output by the step), the peak is the
    waveform's largest deviation."""
    res = _result(name)
    for kind, amp in (("load", 0.2), ("line", 1.0), ("reference", 0.03)):
        sr = step_response(res, kind, amp)
        assert sr.v.shape == sr.i.shape == sr.duty.shape == (res.stage.n_corners, sr.t_s.size)
        assert not sr.findings, [f.message for f in sr.findings]
        np.testing.assert_allclose(sr.final_v, 0.0 if kind != "reference" else amp, atol=1e-12)
        np.testing.assert_allclose(sr.v[:, -1], sr.final_v, atol=1e-3 * np.max(np.abs(sr.peak_v)))
        np.testing.assert_allclose(np.abs(sr.peak_v), np.max(np.abs(sr.v), axis=1))
        assert np.all(sr.settle_s < sr.t_s[-1])
        np.testing.assert_allclose(sr.i[:, 0], res.stage.i_l)
        np.testing.assert_allclose(sr.duty[:, 0], res.stage.duty)


def test_load_step_inductor_current_takes_the_load():
    """After a load step the inductor carries the load's change: a buck's inductor current is the load
    current (Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, ch. 2: capacitor
    charge balance)."""
    res = _result("buck_dsp_5v")
    sr = step_response(res, "load", 0.5)
    np.testing.assert_allclose(sr.i[:, -1] - sr.i0, 0.5, rtol=1e-3)


def test_large_step_flags_duty_saturation():
    res = _result("buck_dsp_5v")
    small = step_response(res, "load", 0.2)
    big = step_response(res, "load", 60.0)
    assert not np.any(small.saturates)
    assert np.all(big.saturates)
    assert {f.code for f in big.findings} == {"duty-saturates"}


def test_unstable_controller_matches_z_plane_roots():
    """A controller gain raised until the sampled loop is unstable: the spectral radius of the period map
    crosses 1 where the z-plane roots of 1 + T(z) leave the unit circle."""
    res = _result("inverting_mcu_minus12v")
    dig = res.digital
    paths = plant_paths(res, "load")
    for gain in (1.0, 3.0, 6.0, 12.0):
        sim = simulate_sampled(paths, dig.b * gain, dig.a, dig.ts_s, dig.delay_s, dig.pwm_steps, 0.1, 0.0,
                               50 * dig.ts_s)
        stable_z = (res.loop * gain).closed_loop_stable()
        np.testing.assert_array_equal(sim["spectral_radius"] < 1, stable_z)
    assert not np.all(stable_z)  # the last gain is unstable somewhere


def test_bad_input_is_a_design_error():
    res = _result("buck_dsp_5v")
    for kwargs in ({"amplitude": 0.0}, {"amplitude": 1.0, "rise_s": -1e-6}, {"amplitude": 1.0, "band_v": 0.0},
                   {"amplitude": 1.0, "span_s": 1e-7, "rise_s": 1e-6}, {"amplitude": np.nan}):
        with pytest.raises(DesignError):
            digital_step_response(res, "load", **kwargs)
    with pytest.raises(DesignError):
        step_response(res, "load", 1.0, steps=[(1e-6, 10)])
    with pytest.raises(DesignError):
        digital_step_response(res, "ramp", 1.0)


def test_hold_controller_keeps_the_designed_controller():
    """A load step's corners keep the controller designed for every corner; at the same operating points
    the margins are the design's own."""
    res = _result("buck_dsp_5v")
    same = hold_controller(res, res.design)
    np.testing.assert_allclose(same.margins.pm_deg, res.margins.pm_deg, atol=1e-9)
    d = res.design
    moved = replace(d, operating=replace(d.operating, load=(2.0,)))
    held = hold_controller(res, moved)
    assert held.digital.controller is res.digital.controller
    assert held.stage.n_corners == len(d.operating.vin)


@pytest.mark.parametrize("name", SAMPLES)
def test_cli_step_on_digital_samples(name, capsys, tmp_path):
    out = tmp_path / "step.csv"
    path = f"sample_designs/{name}.toml"
    assert main(["step", path, "--load", "0.5:1", "--vin-step", "18:24", "--ref-step", "1%", "--rise", "1u",
                 "--csv", str(out)]) == 0
    text = capsys.readouterr().out
    assert "sampled loop" in text and "ADC code" in text
    assert out.read_text().count("il_a") >= 2
    assert main(["step", path, "--load", "0.5:1", "--max-dev", "1m"]) == 1


def test_report_of_a_digital_design_has_the_sampled_load_step():
    """The report's load step of a digital design is the sampled loop's, with the designed controller."""
    from loopkit.report import default_load_step, report_html

    res = _result("buck_dsp_5v")
    text = report_html(res, path="buck_dsp_5v.toml", date="2026-12-03")
    assert '<section id="step">' in text
    a, b = default_load_step(res.design)
    moved = replace(res.design, operating=replace(res.design.operating, load=(a,)))
    sr = step_response(hold_controller(res, moved), "load", b - a)
    table = text[text.index("Step figures per corner"):]
    for k in range(sr.peak_v.size):
        cell = f'<tr><td class="n">{k}</td><td class="n">{format_value(sr.peak_v[k], "V")[:-1]}</td>'
        assert cell in table, cell


def test_cli_set_point_step_in_adc_codes(capsys):
    """``--ref-step 1code``: one ADC code referred to the output, adc_range / 2^bits / sensing gain
    (3.3 V / 4096 / (1.65 V / 5 V) = 2.44 mV for the buck sample; -25.8 mV through the inverting sample's
    differential amplifier, 3.3 V / 1024 / (1.5 V / -12 V)), and where the output settles."""
    path = "sample_designs/buck_dsp_5v.toml"
    assert main(["step", path, "--ref-step", "1code"]) == 0
    out = capsys.readouterr().out
    assert "set-point step 2.44mV" in out and out.count(" 2.44mV ") >= 6
    assert main(["step", "sample_designs/inverting_mcu_minus12v.toml", "--ref-step", "1code"]) == 0
    assert "set-point step -25.8mV" in capsys.readouterr().out
    assert main(["step", path, "--ref-step", "xcode"]) == 2
    assert main(["step", "sample_designs/buck_24v_3v3.toml", "--ref-step", "1code"]) == 2


def test_unstable_corner_is_an_error_without_figures():
    """The inverting sample's controller times 12 (unstable at some corners by the z-plane roots): those
    corners get ``step-unstable`` and NaN figures, the stable ones their figures; no raw exception."""
    res = _result("inverting_mcu_minus12v")
    hot = replace(res, digital=replace(res.digital, b=res.digital.b * 12.0))
    with np.errstate(all="raise"):
        sr = step_response(hot, "load", 0.1, span_s=2e-3)
    unstable = ~(res.loop * 12.0).closed_loop_stable()
    assert np.any(unstable)
    assert {f.corner for f in sr.findings if f.code == "step-unstable"} == set(np.nonzero(unstable)[0])
    assert np.all(np.isnan(sr.peak_v[unstable])) and np.all(np.isfinite(sr.peak_v[~unstable]))
