"""Benchmark: Monte Carlo over the row axis vs python-control per draw and vs one design per draw.

10,000 draws x 6 corners (3 input voltages x 2 loads of the 24 V buck sample, Type III, 12
varied quantities: L, DCR, GBW, C, ESR and the network's seven parts) with full margins
(crossover, PM, GM, closed-loop stability) on the study's grid (24 points per decade).
References, in the same run: python-control 0.10 ``frequency_response`` plus
``stability_margins`` per corner on the same loops (a subset of draws, scaled), and today's
per-design path (``LoopSession(draw_design(...)).run()``, a subset, scaled).  Peak memory by
tracemalloc (a separate run: tracing slows numpy).  Scaling of ``row_margins`` from 1,000 to
100,000 corner-draws (the largest marked slow) and of the dense sweep from 1,000 to 10,000
corners.  Reported (extra_info and printed), never asserted as times.  Without
``--benchmark-enable`` (the default suite) each runs at a small size, as a smoke test.
Run: pytest tests/benchmarks/test_bench_montecarlo.py --benchmark-enable -s
"""

from __future__ import annotations

import time
import tracemalloc
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

control = pytest.importorskip("control")

from loopkit import load_design
from loopkit.design import Operating
from loopkit.loop import LoopSession, design_loop
from loopkit.montecarlo import monte_carlo, prepare_study
from loopkit.rational import TWO_PI
from loopkit.rows import draw_design, row_loop, row_margins
from loopkit.sweep import vin_sweep
from loopkit.tolerances import draw_values, parse_tolerances

ROOT = Path(__file__).resolve().parents[2]
DRAWS = 10_000


def _study():
    d = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    d = replace(d, operating=Operating(3.3, (18.0, 24.0, 32.0), (0.3, 3.0)))
    tol = parse_tolerances({"inductance": "20%", "dcr": "30%", "gbw": "50%",
                            "output_caps": [{"capacitance": "10%", "esr": "30%", "derating": 0.7}]}, 1)
    return prepare_study(replace(d, tolerances=tol))


def _timed(fn):
    """(result, wall seconds, CPU seconds of this process): the CPU time holds better on a shared machine."""
    t0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - t0, time.process_time() - c0


def _peak(fn) -> int:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def _size(benchmark, full: int, smoke: int) -> int:
    return smoke if benchmark.disabled else full


def test_bench_monte_carlo_vs_python_control_and_per_design(benchmark):
    study = _study()
    draws = _size(benchmark, DRAWS, 60)
    assert study.n_corners == 6
    mc, t_ours, c_ours = _timed(lambda: monte_carlo(study, draws, random_state=1))
    assert mc.n == draws
    benchmark.pedantic(lambda: monte_carlo(study, _size(benchmark, 500, 10), random_state=2), rounds=1, iterations=1)

    subset = _size(benchmark, 40, 4)
    values = mc.values[:subset]
    loop, _, _, _ = row_loop(study.design, study.quantities, values, study.f_hz)
    tfs = [loop.to_control(i) for i in range(subset * study.n_corners)]
    w = TWO_PI * study.f_hz

    def reference():
        for tf in tfs:
            control.frequency_response(tf, w)
            control.stability_margins(tf)

    _, t_ref, c_ref = _timed(reference)
    t_ref_all, c_ref_all = t_ref / subset * draws, c_ref / subset * draws
    # like for like: python-control finds the same crossover and phase margin on these loops
    _, pm, _, _, wgc, _ = control.stability_margins(tfs[0])
    np.testing.assert_allclose(mc.margins.pm_deg[0, 0], pm, atol=1e-3)
    np.testing.assert_allclose(mc.margins.fc_hz[0, 0], wgc / TWO_PI, rtol=1e-6)

    per_design = _size(benchmark, 20, 2)
    _, t_one, c_one = _timed(lambda: [LoopSession(draw_design(study.design, study.quantities, v), f_hz=study.f_hz).run()
                               for v in values[:per_design]])
    t_one_all, c_one_all = t_one / per_design * draws, c_one / per_design * draws
    peak = _peak(lambda: monte_carlo(study, _size(benchmark, 2000, 20), random_state=1))
    info = {"draws": draws, "corners": 6, "grid_points": int(study.f_hz.size), "loopkit_s": t_ours,
            "python_control_scaled_s": t_ref_all, "per_design_scaled_s": t_one_all,
            "ratio_python_control": t_ref_all / t_ours, "ratio_per_design": t_one_all / t_ours,
            "peak_mib_2000_draws": peak / 2**20, "loopkit_cpu_s": c_ours, "python_control_scaled_cpu_s": c_ref_all,
            "per_design_scaled_cpu_s": c_one_all, "cpu_ratio_python_control": c_ref_all / c_ours,
            "cpu_ratio_per_design": c_one_all / c_ours}
    benchmark.extra_info.update(info)
    print(f"\nMonte Carlo {draws} draws x 6 corners, {study.f_hz.size} points: loopkit {t_ours:.2f} s;"
          f" python-control (scaled from {subset} draws) {t_ref_all:.1f} s, ratio {t_ref_all / t_ours:.1f}x;"
          f" one design per draw (scaled from {per_design}) {t_one_all:.1f} s, ratio {t_one_all / t_ours:.1f}x;"
          f" peak memory (2000 draws) {peak / 2**20:.0f} MiB; CPU time: loopkit {c_ours:.2f} s, python-control"
          f" {c_ref_all:.1f} s ({c_ref_all / c_ours:.1f}x), one design per draw {c_one_all:.1f} s"
          f" ({c_one_all / c_ours:.1f}x)")


def _scaling(study, sizes):
    out = []
    for rows in sizes:
        n = rows // study.n_corners
        v = draw_values(study.quantities, n, np.random.default_rng(0))
        _, t, c = _timed(lambda v=v: row_margins(study.design, study.quantities, v, study.f_hz))
        peak = _peak(lambda v=v: row_margins(study.design, study.quantities, v, study.f_hz))
        out.append((rows, t, c, peak))
    return out


def _report(benchmark, rows):
    for n, t, c, peak in rows:
        benchmark.extra_info[f"{n}_s"] = t
        benchmark.extra_info[f"{n}_cpu_s"] = c
        benchmark.extra_info[f"{n}_us_per_row"] = t / n * 1e6
        benchmark.extra_info[f"{n}_peak_mib"] = peak / 2**20
        print(f"{n} corner-draws: {t:.2f} s, CPU {c:.2f} s ({c / n * 1e6:.0f} us per row); peak memory"
              f" {peak / 2**20:.0f} MiB")


def test_bench_row_scaling_1k_10k(benchmark):
    study = _study()
    benchmark.pedantic(lambda: row_margins(study.design, study.quantities, study.nominal_values[None, :],
                                           study.f_hz), rounds=1, iterations=1)
    print()
    _report(benchmark, _scaling(study, (1_000, 10_000) if not benchmark.disabled else (120,)))


@pytest.mark.slow
def test_bench_row_scaling_100k(benchmark):
    if benchmark.disabled:
        pytest.skip("100,000 corner-draws only with --benchmark-enable")
    study = _study()
    benchmark.pedantic(lambda: None, rounds=1, iterations=1)
    print()
    _report(benchmark, _scaling(study, (100_002,)))


def test_bench_sweep_linear_and_flat(benchmark):
    """The dense sweep at 1,000 and 10,000 corners (input voltages x 2 loads): time and peak memory."""
    d = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    d = replace(d, operating=Operating(3.3, (18.0, 24.0, 32.0), (0.3, 3.0)))
    r = design_loop(d)
    benchmark.pedantic(lambda: vin_sweep(d, r, np.linspace(18, 32, 10)), rounds=1, iterations=1)
    print()
    for corners in (1_000, 10_000) if not benchmark.disabled else (100,):
        vin = np.linspace(18, 32, corners // 2)
        _, t, c = _timed(lambda vin=vin: vin_sweep(d, r, vin))
        peak = _peak(lambda vin=vin: vin_sweep(d, r, vin))
        benchmark.extra_info[f"sweep_{corners}_s"] = t
        benchmark.extra_info[f"sweep_{corners}_cpu_s"] = c
        benchmark.extra_info[f"sweep_{corners}_peak_mib"] = peak / 2**20
        print(f"sweep {corners} corners x {r.f_hz.size} points: {t:.2f} s, CPU {c:.2f} s, peak {peak / 2**20:.0f} MiB")
