"""Benchmark: the built-in switching simulator against ngspice, and the averaged 21-corner load step.

1. Same circuit, same simulated time, same run: the 24 V -> 3.3 V buck sample in closed loop
   (Type III network, voltage mode), 400 switching periods from the averaged operating point.
   ngspice: tests/reference/closed_loop_spice.py (the network's own circuit; solver step at most
   Ts/10).  loopkit.switching: ``Engine.run`` for the same 400 periods, (a) one corner, (b) all
   9 corners of the sample in one run (ngspice: 9 runs, one per corner, timed as their sum).
   The output at the end is checked equal to 3e-4 (the tolerance of
   tests/test_switching_ngspice.py).  Reported as medians and ratios (extra_info), never asserted.
   Also reported: the periodic steady state of all 9 corners by shooting (``steady_state``),
   which is what ``loopkit simulate`` does instead of simulating the settling.
   Measured 2026-12-03 on the shared 2-core machine (load average 3-4, so both sides vary by up
   to 2x between runs; the ratio moves less), five runs: one corner, ngspice 0.65-1.12 s, loopkit
   0.029-0.059 s, ratio 16-23 (before that day's event-search rework: 0.41 s, ratio 2-3); 9
   corners in one run 0.15-0.39 s against 5.9-10.0 s, ratio 22-41.  What is left of a
   single-corner period is numpy's per-call cost (a few dozen calls on arrays of a few modes: the
   scan, one or two Newton evaluations, the modal state at each interval's end), not arithmetic.
2. The load step of 21 corners (7 Vin x 3 loads) from the averaged model
   (``timeresponse.step_response``) against python-control 0.10 ``forced_response`` corner by
   corner on the same closed-loop output impedances (as tests/benchmarks/test_bench_step.py),
   and the switching simulator's load step of the same 21 corners in one run for scale.

Run: pytest tests/benchmarks/test_bench_switching.py --benchmark-enable -s
"""

import shutil
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from reference import closed_loop_spice, pcm_spice

from loopkit import load_design
from loopkit import switching as sw
from loopkit.design import Operating
from loopkit.loop import LoopSession, Targets, design_loop, network_context
from loopkit.networks import network_module
from loopkit.switching.engine import Record

ROOT = Path(__file__).resolve().parents[2]
PERIODS = 400


def _median(fn, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def _spice_case(design, result, k):
    st = design.stage
    ts = 1.0 / st.fsw
    return pcm_spice.PcmCase(
        "buck", st.fsw, st.inductance, tuple((b.c_total, b.esr_total) for b in st.output_caps),
        float(result.stage.vin[k]), design.operating.vout, abs(design.operating.vout) / float(result.stage.load[k]),
        0.0, design.modulator.ramp / ts, dcr_ohm=st.dcr, r_switch_ohm=st.r_switch, r_rect_ohm=st.r_rectifier,
        rectifier=st.rectifier, max_duty=design.modulator.max_duty)


@pytest.mark.ngspice
@pytest.mark.slow
@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice not installed")
def test_bench_switching_vs_ngspice(benchmark):
    design = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    result = design_loop(design)
    setup = sw.closed_loop_setup(result)
    eng = setup.engine
    n = result.stage.n_corners
    deck = network_module(result.network).netlist(result.parts, network_context(design), "network")
    ts = eng.ts

    def spice(k):
        state0 = (float(result.stage.i_l[k] - result.stage.ripple_pp[k] / 2), design.operating.vout)
        return closed_loop_spice.run(_spice_case(design, result, k), deck, float(setup.vc0[k]), state0, PERIODS,
                                     t_keep_s=(PERIODS - 10) * ts)

    def ours(corners):
        rec = Record()
        z = eng.run(eng.lanes(corners), setup.z0[corners].copy(), PERIODS - 10)
        eng.run(eng.lanes(corners), z, 10, first_period=PERIODS - 10, record=rec)
        return rec.arrays()["vo_avg"].mean(axis=1)

    k = 4
    v_one = benchmark.pedantic(ours, args=(np.array([k]),), rounds=3, iterations=1)
    ref = spice(k)
    v_ref = pcm_spice._mean(ref["t"], ref["v"], (PERIODS - 10) * ts, PERIODS * ts)
    assert v_one[0] == pytest.approx(v_ref, rel=3e-4)
    t_one = _median(lambda: ours(np.array([k])), 3)
    t_all = _median(lambda: ours(np.arange(n)), 3)
    t_spice_one = _median(lambda: spice(k), 3)
    t_spice_all = t_spice_one * n
    t0 = time.perf_counter()
    ss = sw.steady_state(setup)
    t_shoot = time.perf_counter() - t0
    assert np.all(ss.settled)
    info = {
        "periods": PERIODS,
        "ngspice_one_corner_s": t_spice_one,
        "loopkit_one_corner_s": t_one,
        "ratio_one_corner": t_spice_one / t_one,
        "ngspice_all_corners_s": t_spice_all,
        "loopkit_all_corners_one_run_s": t_all,
        "ratio_all_corners": t_spice_all / t_all,
        "loopkit_steady_state_all_corners_s": t_shoot,
        "ratio_ngspice_settle_vs_shooting": t_spice_all / t_shoot,
    }
    benchmark.extra_info.update(info)
    print("\n" + "\n".join(f"{key}: {val:.4g}" for key, val in info.items()))


def _control_system(control, tf, k, w0):
    """Corner ``k`` of ``tf`` for python-control, section by section in time scaled by ``w0`` (as
    tests/benchmarks/test_bench_step.py: a whole 8th-order polynomial loses accuracy there)."""
    from loopkit.rational import Rational
    from loopkit.timeresponse import _pairing

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
def test_bench_21_corner_load_step(benchmark):
    control = pytest.importorskip("control")
    from loopkit.timeresponse import closed_loop_transfers, step_response

    design = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    design = replace(design, operating=Operating(3.3, tuple(np.linspace(18, 32, 7)), (0.3, 1.5, 3.0)))
    result = LoopSession(design).run(Targets("type3", 40e3, 60.0))
    assert result.feasible and result.stage.n_corners == 21
    span = step_response(result, "load", 1.0).t_s[-1]
    steps = [(span / 2000, 2000)]  # a uniform grid: python-control's forced_response needs one
    avg = benchmark(lambda: step_response(result, "load", 1.0, steps=steps))
    tf = closed_loop_transfers(result, "load")["v"]
    t = avg.t_s
    u = np.ones_like(t)
    w0 = 2 * np.pi * float(np.nanmax(result.margins.fc_hz))
    systems = [_control_system(control, tf, k, w0) for k in range(21)]

    def reference():
        return [control.forced_response(s, t * w0, u).outputs for s in systems]

    ref = reference()
    for k in range(21):
        np.testing.assert_allclose(avg.v[k], ref[k], rtol=0, atol=1e-6 * np.max(np.abs(ref[k])))
    t_ours = _median(lambda: step_response(result, "load", 1.0, steps=steps), 5)
    t_ref = _median(reference, 3)
    setup = sw.closed_loop_setup(result)
    t0 = time.perf_counter()
    step = sw.load_step(setup, 1.0, periods=200)
    t_sw = time.perf_counter() - t0
    info = {"averaged_21_corners_s": t_ours, "python_control_21_corners_s": t_ref, "ratio": t_ref / t_ours,
            "switching_21_corners_200_periods_s": t_sw,
            "switching_peak_over_averaged_min": float(np.min(step.peak_ratio)),
            "switching_peak_over_averaged_max": float(np.max(step.peak_ratio))}
    benchmark.extra_info.update(info)
    print("\n" + "\n".join(f"{key}: {val:.4g}" for key, val in info.items()))
