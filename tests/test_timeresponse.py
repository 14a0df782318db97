"""Closed-loop step responses (loopkit.timeresponse) against outside references.

- python-control 0.10 ``forced_response`` on the same closed-loop systems, every sample design,
  every step kind, every corner (output voltage; duty and inductor current in voltage mode).
- Closed-form responses: first order to a ramp-limited step, a triple real pole, the
  second-order step (K. Ogata, Modern Control Engineering, 5th ed., 2010, sec. 5-3: overshoot
  exp(-pi zeta / sqrt(1 - zeta^2)), peak time pi / wd; from memory).
- Kirchhoff's current law at a buck's output in steady state (the inductor carries the load).
"""

from __future__ import annotations

import glob
from functools import cache

import numpy as np
import pytest
from numpy.testing import assert_allclose

from loopkit.designfile import load_design
from loopkit.errors import DesignError
from loopkit.loop import design_loop
from loopkit.rational import Rational
from loopkit.timeresponse import (
    _pairing,
    closed_loop_transfers,
    deviation_rule_of_thumb,
    ramp_step,
    realise,
    sizing,
    step_figures,
    step_response,
    time_grid,
)

SAMPLES = sorted(glob.glob("sample_designs/*.toml"))


@cache
def _result(path):
    return design_loop(load_design(path))


def _control_sections(tf: Rational, k: int, w0: float):
    """python-control StateSpace of corner k: each section converted by python-control (tf -> ss), in series.

    Time is scaled by ``w0`` (s -> s w0) so each section's polynomial is well conditioned.  The grouping of
    factors into sections is loopkit's (bookkeeping only); the realisation, the series connection and the
    time stepping (matrix exponential with first-order hold) are python-control's.
    """
    import control

    out = None
    for zeros, poles in _pairing(tf.num[k], tf.den[k]):
        piece = Rational.from_factors(1.0, np.array(zeros).reshape(-1, 2), np.array(poles).reshape(-1, 2))
        c = piece.to_control(0)
        num, den = np.asarray(c.num[0][0], float), np.asarray(c.den[0][0], float)
        num = num * w0 ** np.arange(len(num) - 1, -1, -1)
        den = den * w0 ** np.arange(len(den) - 1, -1, -1)
        part = control.ss(control.tf(num / den[0], den / den[0]))
        out = part if out is None else control.series(out, part)
    return out * float(tf.gain[k])


@pytest.mark.slow
@pytest.mark.parametrize("path", SAMPLES)
def test_waveforms_match_python_control(path):
    """Every corner, every step kind, v (and d, i in voltage mode) within 1e-6 of the peak."""
    import control

    result = _result(path)
    fc = np.nanmax(result.margins.fc_hz)
    dt, n_rise, n = 1.0 / (50 * fc), 20, 1500
    steps = [(dt, n_rise), (dt, n - n_rise)]
    t = np.arange(n + 1) * dt
    w0 = 2 * np.pi * fc
    for kind, amp in (("load", 0.5), ("line", 1.0), ("reference", 0.01)):
        for key, tf in closed_loop_transfers(result, kind).items():
            if tf is None:
                assert result.design.control.scheme != "voltage-mode" and key != "v"
                continue
            y = ramp_step(realise(tf), amp, n_rise * dt, steps)
            u = amp * np.minimum(t / (n_rise * dt), 1.0)
            for k in range(tf.n_corners):
                ref = control.forced_response(_control_sections(tf, k, w0), t * w0, u).outputs
                assert_allclose(y[k], ref, rtol=0, atol=1e-6 * np.max(np.abs(ref)), err_msg=f"{kind} {key} #{k}")


def test_load_step_matches_python_control_fast():
    """The default suite's share of the check above: one voltage-mode and one current-mode sample, load step."""
    import control

    for path in ("sample_designs/buck_24v_3v3.toml", "sample_designs/flyback_pcm_48v_12v.toml"):
        result = _result(path)
        tf = closed_loop_transfers(result, "load")["v"]
        fc = np.nanmax(result.margins.fc_hz)
        dt, n_rise, n = 1.0 / (50 * fc), 20, 800
        t = np.arange(n + 1) * dt
        y = ramp_step(realise(tf), 1.0, n_rise * dt, [(dt, n_rise), (dt, n - n_rise)])
        u = np.minimum(t / (n_rise * dt), 1.0)
        for k in (0, tf.n_corners - 1):
            ref = control.forced_response(_control_sections(tf, k, 2 * np.pi * fc), t * 2 * np.pi * fc, u).outputs
            assert_allclose(y[k], ref, rtol=0, atol=1e-6 * np.max(np.abs(ref)))


@pytest.mark.slow
@pytest.mark.parametrize("path", SAMPLES[:3])
def test_whole_transfer_in_python_control_where_well_conditioned(path):
    """``Rational.to_control(k)`` of the whole load-step transfer, for the corners whose polynomial python-control
    can realise (coefficients within 1e12 after time scaling): the same waveform to 1e-6."""
    import control

    result = _result(path)
    tf = closed_loop_transfers(result, "load")["v"]
    fc = np.nanmax(result.margins.fc_hz)
    dt, n = 1.0 / (50 * fc), 1000
    steps = [(dt, n)]
    t = np.arange(n + 1) * dt
    y = ramp_step(realise(tf), 1.0, 0.0, steps)
    w0 = 2 * np.pi * fc
    checked = 0
    for k in range(tf.n_corners):
        c = tf.to_control(k)
        num, den = np.asarray(c.num[0][0], float), np.asarray(c.den[0][0], float)
        num = num * w0 ** np.arange(len(num) - 1, -1, -1)
        den = den * w0 ** np.arange(len(den) - 1, -1, -1)
        if np.ptp(np.log10(np.abs(den[den != 0]))) > 12:
            continue
        ref = control.step_response(control.tf(num / den[0], den / den[0]), t * w0).outputs
        assert_allclose(y[k], ref, rtol=0, atol=1e-6 * np.max(np.abs(ref)))
        checked += 1
    if checked == 0:
        pytest.skip("no corner with a polynomial python-control realises accurately")


def test_first_order_ramp_limited_step_closed_form():
    """1/(1 + s tau) to u = min(t/tr, 1): tr - tau(1 - exp(-t/tau)) over tr, then the shifted difference."""
    tau, tr = 1e-4, 3e-4
    tf = Rational.from_factors(1.0, (), [(1.0, tau)])
    t, steps = time_grid(2e-3, tr, 1e-6)
    y = ramp_step(realise(tf), 2.0, tr, steps)[0]

    def ramp(x):
        x = np.maximum(x, 0.0)
        return x - tau * (1 - np.exp(-x / tau))

    assert_allclose(y, 2.0 / tr * (ramp(t) - ramp(t - tr)), rtol=0, atol=1e-12)


def test_triple_pole_step_closed_form():
    """1/(1 + s tau)^3: 1 - exp(-x)(1 + x + x^2/2), x = t/tau (a repeated pole, no partial fractions)."""
    tau = 2e-5
    tf = Rational.from_factors(1.0, (), [(1.0, tau)] * 3)
    t, steps = time_grid(5e-4, 0.0, 1e-7)
    y = ramp_step(realise(tf), 1.0, 0.0, steps)[0]
    x = t / tau
    assert_allclose(y, 1 - np.exp(-x) * (1 + x + x**2 / 2), rtol=0, atol=1e-12)


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.5, 0.7])
def test_second_order_overshoot_and_peak_time(zeta):
    """w^2/(s^2 + 2 zeta w s + w^2): overshoot exp(-pi zeta/sqrt(1 - zeta^2)), peak at pi/wd (Ogata 5-3)."""
    w = 2 * np.pi * 1e3
    tf = Rational.from_polys([[w**2]], [[w**2, 2 * zeta * w, 1.0]])
    t, steps = time_grid(20e-3, 0.0, 1e-7, max_points=250_000)
    y = ramp_step(realise(tf), 1.0, 0.0, steps)
    wd = w * np.sqrt(1 - zeta**2)
    exact = 1 - np.exp(-zeta * w * t) * (np.cos(wd * t) + zeta / np.sqrt(1 - zeta**2) * np.sin(wd * t))
    assert_allclose(y[0], exact, rtol=0, atol=1e-9)  # rounding over 2e5 exact steps
    fig = step_figures(t, y, np.array([1.0]), 0.02, disturbance=False)
    assert_allclose(fig["overshoot_pct"][0], 100 * np.exp(-np.pi * zeta / np.sqrt(1 - zeta**2)), rtol=1e-6)
    assert_allclose(fig["t_peak_s"][0], np.pi / wd, rtol=1e-3)


def test_settling_finder_on_exponential():
    """1 - exp(-t/tau) enters a band b at tau ln(1/b) exactly; interpolated on the grid."""
    tau, band = 1e-3, 0.01
    t = np.linspace(0, 10e-3, 20001)
    y = (1 - np.exp(-t / tau))[None, :]
    fig = step_figures(t, y, np.array([1.0]), band, disturbance=False)
    assert_allclose(fig["settle_s"][0], tau * np.log(1 / band), rtol=1e-6)
    assert fig["overshoot_pct"][0] == 0
    short = step_figures(t[:4000], y[:, :4000], np.array([1.0]), band, disturbance=False)
    assert np.isnan(short["settle_s"][0]) and not short["settled_at_end"][0]


def test_peak_and_rebound_of_a_damped_sine():
    """y = -exp(-a t) sin(w t): first peak at atan(w/a)/w, rebound exp(-a pi/w) of it (analytic)."""
    a, w = 300.0, 2 * np.pi * 1e3
    t = np.linspace(0, 20e-3, 400_001)
    y = (-np.exp(-a * t) * np.sin(w * t))[None, :]
    fig = step_figures(t, y, np.array([0.0]), 1e-3, disturbance=True)
    t1 = np.arctan(w / a) / w
    assert_allclose(fig["t_peak_s"][0], t1, rtol=1e-3)
    assert_allclose(fig["peak"][0], -np.exp(-a * t1) * np.sin(w * t1), rtol=1e-8)
    assert_allclose(fig["overshoot_pct"][0], 100 * np.exp(-a * np.pi / w), rtol=1e-6)


def test_buck_inductor_carries_the_load_step():
    """Kirchhoff at the output in steady state: the capacitor's mean current is 0, so a buck's inductor
    current rises by the load step; with the integrator the output returns to its set point."""
    result = _result("sample_designs/buck_24v_3v3.toml")
    sr = step_response(result, "load", 1.5, rise_s=1e-6)
    ccm = ~result.stage.dcm
    assert_allclose((sr.i[:, -1] - sr.i0)[ccm], 1.5, rtol=1e-3)
    assert_allclose(sr.final_v, 0.0, atol=1e-6)
    assert np.all(sr.peak_v < 0)  # more load: the output dips


def test_reference_step_final_value_and_line_rejection():
    """Integrating loop: a set-point step moves the output by the step and an input step leaves it where it was,
    but for 1/(1 + T(0)) with the op-amp's finite open-loop gain (this sample: below 1e-5)."""
    result = _result("sample_designs/buck_24v_3v3.toml")
    ref = step_response(result, "reference", 0.033)
    assert_allclose(ref.v[:, -1], 0.033, rtol=1e-3)
    assert_allclose(ref.final_v, 0.033, rtol=1e-5)
    line = step_response(result, "line", 2.0)
    assert_allclose(line.final_v, 0.0, atol=2.0 * 1e-5)


def test_duty_saturation_is_flagged():
    """A step large enough to need a duty above max_duty raises a duty-saturates finding."""
    result = _result("sample_designs/buck_24v_3v3.toml")
    small = step_response(result, "load", 0.1)
    assert not small.saturates.any()
    big = step_response(result, "load", 300.0)
    assert big.saturates.all()
    assert {f.corner for f in big.findings if f.code == "duty-saturates"} == set(range(result.stage.n_corners))


def test_current_mode_gives_voltage_only():
    result = _result("sample_designs/boost_pcm_12v_24v.toml")
    sr = step_response(result, "load", 0.5)
    assert sr.i is None and sr.duty is None
    assert np.all(np.isfinite(sr.peak_v))


def test_sizing_rule_round_trip():
    """dV ~ dI/(2 pi fc C) (common practice, no source): the sized fc and C give back the allowed dV."""
    out = sizing(2.0, 0.05, np.array([10e3, 20e3]), 100e-6)
    assert_allclose(deviation_rule_of_thumb(2.0, out["fc_needed_hz"], 100e-6), 0.05)
    assert_allclose(deviation_rule_of_thumb(2.0, np.array([10e3, 20e3]), out["c_needed_f"]), 0.05)
    assert_allclose(out["estimate_v"], 2.0 / (2 * np.pi * np.array([10e3, 20e3]) * 100e-6))


@pytest.mark.parametrize("kwargs", [{"kind": "jump", "amplitude": 1.0}, {"kind": "load", "amplitude": 0.0},
                                    {"kind": "load", "amplitude": 1.0, "rise_s": -1e-6},
                                    {"kind": "load", "amplitude": 1.0, "band_v": 0.0}])
def test_bad_input_is_a_design_error(kwargs):
    with pytest.raises(DesignError):
        step_response(_result("sample_designs/buck_24v_3v3.toml"), **kwargs)


def test_cli_step_table_csv_and_exit_status(tmp_path, capsys):
    """The command prints the library's own figures, writes the waveforms, and exits 1 only when a spec is missed."""
    from loopkit.cli import main

    path = "sample_designs/buck_24v_3v3.toml"
    out = tmp_path / "w.csv"
    assert main(["step", path, "--load", "0.5:3", "--rise", "1u", "--csv", str(out)]) == 0
    text = capsys.readouterr().out
    assert "load step 500mA to 3A" in text and "Caution" in text and "common practice, no source" in text
    rows = out.read_text().splitlines()
    assert rows[1].startswith("load t_s,") and rows[1].count("dv_v") == 3 and len(rows) > 100
    assert main(["step", path, "--load", "0.5:3", "--max-dev", "1m"]) == 1
    assert main(["step", path, "--load", "0.5:3", "--max-dev", "10%"]) == 0
    assert main(["step", path]) == 2
    assert main(["step", path, "--load", "3"]) == 2
    assert main(["step", path, "--ref-step", "1%", "--corner", "99"]) == 2


@pytest.mark.parametrize("path", ["sample_designs/boost_liion_5v.toml", "sample_designs/inverting_minus15v.toml"])
def test_boost_type_charge_balance_after_a_load_step(path):
    """Capacitor charge balance (Erickson & Maksimovic, 2nd ed., sec. 2.3): the rectifier delivers d' iL to
    the output, so in steady state d' iL = |I_out|, linearised D' dI_L - I_L dD = dI_out.  A rise of the load
    current's magnitude must raise the inductor current and bring |Vout| down first (also on the negative rail)."""
    result = _result(path)
    ccm = ~result.stage.dcm
    sr = step_response(result, "load", 0.05, span_s=0.1)  # settled: the light-load corners are slow
    d_il = sr.i[:, -1] - sr.i0
    d_d = sr.duty[:, -1] - sr.duty0
    lhs = (1 - sr.duty0) * d_il - sr.i0 * d_d
    assert_allclose(lhs[ccm], 0.05, rtol=1e-4)
    assert np.all(d_il[ccm] > 0)
    assert np.all(np.sign(sr.peak_v) == -np.sign(result.design.operating.vout))


def test_improper_transfer_is_refused():
    with pytest.raises(DesignError):
        realise(Rational.from_factors(1.0, [(1.0, 1e-3), (1.0, 1e-4)], [(1.0, 1e-2)]))
