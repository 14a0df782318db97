"""Benchmark: the load-step response of 21 corners from the averaged model vs python-control.

21 corners (7 Vin x 3 loads) of the 24 V -> 3.3 V buck, a 1 A load step with a 1 us rise, 2000
time points.  loopkit: realisation of the closed-loop output impedance of every corner and exact
stepping of all corners at once (``realise`` + ``ramp_step``), and the whole ``step_response``
(output, duty and inductor current, figures).  Reference, in the same run: python-control 0.10
``forced_response`` corner by corner on the same systems (each converted section by section, as
in tests/test_timeresponse.py: python-control cannot realise the whole 8th-order polynomial of
these corners accurately).  The waveforms are checked equal (1e-6 of the peak); the times are
reported as a ratio (extra_info), never asserted.  Run: pytest tests/benchmarks --benchmark-enable
"""

import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

control = pytest.importorskip("control")

from loopkit import load_design
from loopkit.design import Operating
from loopkit.loop import LoopSession, Targets
from loopkit.rational import Rational
from loopkit.timeresponse import _pairing, closed_loop_transfers, ramp_step, realise, step_response

ROOT = Path(__file__).resolve().parents[2]


def _median(fn, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def _control_system(tf, k, w0):
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


def test_bench_load_step_vs_python_control(benchmark):
    design = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    design = replace(design, operating=Operating(3.3, tuple(np.linspace(18, 32, 7)), (0.3, 1.5, 3.0)))
    result = LoopSession(design).run(Targets("type3", 40e3, 60.0))
    assert result.feasible and result.stage.n_corners == 21
    tf = closed_loop_transfers(result, "load")["v"]
    fc = float(np.nanmax(result.margins.fc_hz))
    dt, rise = 1.0 / (50 * fc), 1e-6
    n_rise = round(rise / dt)
    dt = rise / n_rise
    steps = [(dt, n_rise), (dt, 2000 - n_rise)]
    t = np.arange(2001) * dt
    u = np.minimum(t / rise, 1.0)
    w0 = 2 * np.pi * fc
    systems = [_control_system(tf, k, w0) for k in range(21)]

    def reference():
        return [control.forced_response(s, t * w0, u).outputs for s in systems]

    def ours():
        return ramp_step(realise(tf), 1.0, rise, steps)

    y = benchmark(ours)
    ref = reference()
    for k in range(21):
        np.testing.assert_allclose(y[k], ref[k], rtol=0, atol=1e-6 * np.max(np.abs(ref[k])))
    t_ours = _median(ours, 10)
    t_ref = _median(reference, 3)
    t_full = _median(lambda: step_response(result, "load", 1.0, rise_s=rise, steps=steps), 5)
    benchmark.extra_info.update({"loopkit_median_ms": t_ours * 1e3, "python_control_median_ms": t_ref * 1e3,
                                 "ratio": t_ref / t_ours, "step_response_median_ms": t_full * 1e3,
                                 "step_response_ratio": t_ref / t_full})
    print(f"\nload step, 21 corners x 2001 points: loopkit {t_ours * 1e3:.1f} ms, python-control"
          f" {t_ref * 1e3:.1f} ms, ratio {t_ref / t_ours:.1f}x; whole step_response (v, duty, iL, figures)"
          f" {t_full * 1e3:.1f} ms, ratio {t_ref / t_full:.1f}x")
