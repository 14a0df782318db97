"""Benchmark (issue 2, section 7): plant frequency response, 250 corners x 1000 frequencies.

loopkit evaluates Gvd of all 250 corners (50 input voltages x 5 loads) in one
vectorised ``Rational.response`` call; the reference is python-control 0.10.2
evaluating the same transfer functions corner by corner in the same process:
``control.frequency_response(tf, omega)`` (the library's own entry point) and,
for a second figure, the bare ``tf(s)`` evaluation (numpy polyval inside).
The TransferFunction objects are built before timing: only evaluation is
compared.  No timed assertion (figures are reported: printed and in
``extra_info``); the results must agree.

With ``--benchmark-enable`` pytest-benchmark times loopkit's call; when
benchmarks are disabled (the default suite) each path runs a few times and the
test still checks the results and prints the ratio.
"""

from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from loopkit import analyse_stage, load_design
from loopkit.design import Operating

control = pytest.importorskip("control")

SAMPLES = Path(__file__).resolve().parents[2] / "sample_designs"
N_VIN, N_LOAD, N_F = 50, 5, 1000


def _sweep(name: str):
    design = load_design(SAMPLES / name)
    op = design.operating
    vin = np.linspace(min(op.vin), max(op.vin), N_VIN)
    load = np.linspace(min(op.load), max(op.load), N_LOAD)
    design = replace(design, operating=Operating(vout=op.vout, vin=tuple(vin), load=tuple(load)))
    stage = analyse_stage(design)
    f_hz = np.logspace(1.0, np.log10(design.stage.fsw / 2.0), N_F)
    return stage, f_hz


def _median_s(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


@pytest.mark.parametrize("sample", ["boost_liion_5v.toml", "fourswitch_automotive_9v.toml"])
def test_plant_response_250_corners_vs_python_control(benchmark, sample):
    stage, f_hz = _sweep(sample)
    assert stage.n_corners == N_VIN * N_LOAD
    w = 2.0 * np.pi * f_hz
    tfs = [stage.gvd.to_control(k) for k in range(stage.n_corners)]

    def loopkit_all_corners():
        return stage.gvd.response(f_hz)

    def control_frequency_response():
        return np.array([control.frequency_response(tf, w).complex for tf in tfs])

    def control_tf_eval():
        return np.array([tf(1j * w) for tf in tfs])

    got = benchmark(loopkit_all_corners)
    assert got.shape == (N_VIN * N_LOAD, N_F)
    np.testing.assert_allclose(got, control_frequency_response(), rtol=1e-9)
    np.testing.assert_allclose(got, control_tf_eval(), rtol=1e-9)

    repeat = 15 if benchmark.enabled else 3
    t_ours = benchmark.stats.stats.median if benchmark.enabled else _median_s(loopkit_all_corners, repeat)
    t_fr = _median_s(control_frequency_response, repeat)
    t_ev = _median_s(control_tf_eval, repeat)
    info = {
        "corners": stage.n_corners,
        "frequencies": N_F,
        "loopkit_median_ms": 1e3 * t_ours,
        "control_frequency_response_median_ms": 1e3 * t_fr,
        "control_tf_eval_median_ms": 1e3 * t_ev,
        "ratio_vs_frequency_response": t_fr / t_ours,
        "ratio_vs_tf_eval": t_ev / t_ours,
        "goal_ratio": 50.0,
    }
    benchmark.extra_info.update(info)
    print(
        f"\n{sample}: {stage.n_corners} corners x {N_F} f: loopkit {info['loopkit_median_ms']:.2f} ms, "
        f"control.frequency_response loop {info['control_frequency_response_median_ms']:.2f} ms "
        f"(x{info['ratio_vs_frequency_response']:.1f}), tf(s) loop {info['control_tf_eval_median_ms']:.2f} ms "
        f"(x{info['ratio_vs_tf_eval']:.1f}); goal x50"
    )
