"""Benchmark: the slider path (synthesis + margins for every corner) vs python-control.

21 corners (7 Vin x 3 loads) x 1000 frequencies.  loopkit: ``LoopSession.run``
(synthesis at the design corner, snapping, loop gain and refined margins at
every corner, closed-loop poles).  Reference, in the same run: python-control
0.10 ``frequency_response`` plus ``stability_margins`` corner by corner on the
same loop transfer functions.  Reported as a ratio (extra_info), never asserted
as a time.  Run: pytest tests/benchmarks --benchmark-enable
"""

import time
from pathlib import Path

import numpy as np
import pytest

control = pytest.importorskip("control")

from loopkit import load_design
from loopkit.design import Operating
from loopkit.loop import LoopSession, Targets
from loopkit.rational import TWO_PI

ROOT = Path(__file__).resolve().parents[2]


def _session():
    design = load_design(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    op = Operating(3.3, tuple(np.linspace(18, 32, 7)), (0.3, 1.5, 3.0))
    from dataclasses import replace

    design = replace(design, operating=op)
    return LoopSession(design)


def _median(fn, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def test_bench_slider_path_vs_python_control(benchmark):
    session = _session()
    targets = Targets("type3", 40e3, 60.0)
    result = session.run(targets)
    assert result.feasible and session.stage.n_corners == 21 and session.f_hz.size == 1000
    tfs = [result.loop.to_control(i) for i in range(21)]
    w = TWO_PI * session.f_hz

    def reference():
        for tf in tfs:
            control.frequency_response(tf, w)
            control.stability_margins(tf)

    # a slider move is a preview run (LoopSession.run(preview=True)), as the app makes it
    fcs = iter(np.geomspace(30e3, 50e3, 10_000))
    ours = benchmark(lambda: session.run(Targets("type3", next(fcs), 60.0), preview=True))
    assert ours.feasible
    moves = iter(np.geomspace(38e3, 42e3, 10_000))
    t_ours = _median(lambda: session.run(Targets("type3", next(moves), 60.0), preview=True), 30)
    t_full = _median(lambda: session.run(targets), 3)
    t_ref = _median(reference, 5)
    # like for like: only the frequency response and margins of the 21 loops, no synthesis
    from loopkit.margins import loop_margins

    t_margins = _median(lambda: loop_margins(result.loop, session.f_hz, result.loop.response(session.f_hz)), 30)
    benchmark.extra_info.update({"loopkit_median_ms": t_ours * 1e3, "python_control_median_ms": t_ref * 1e3,
                                 "full_run_with_search_median_ms": t_full * 1e3,
                                 "ratio": t_ref / t_ours, "margins_only_median_ms": t_margins * 1e3,
                                 "margins_only_ratio": t_ref / t_margins})
    print(f"\nslider path (preview): loopkit {t_ours * 1e3:.2f} ms (a full run with the worst-corner search"
          f" {t_full * 1e3:.0f} ms), python-control {t_ref * 1e3:.2f} ms,"
          f" ratio {t_ref / t_ours:.1f}x; response+margins only {t_margins * 1e3:.2f} ms,"
          f" ratio {t_ref / t_margins:.1f}x")
    # the reference gives the same margins (checked here so the comparison is like for like)
    _, pm, _, _, wgc, _ = control.stability_margins(tfs[0])
    np.testing.assert_allclose(result.margins.pm_deg[0], pm, atol=1e-3)
    np.testing.assert_allclose(result.margins.fc_hz[0], wgc / TWO_PI, rtol=1e-6)


def test_bench_slider_path_current_mode_vs_voltage_mode(benchmark):
    """The slider path (preview runs) at 21 corners with peak current mode, as a ratio to voltage mode in the same run.

    Current mode adds the inner current loop (Ridley's model closed with Rational.feedback) to the
    session's fixed part; a slider move re-synthesises the network on the fixed Tu, as in voltage mode.
    """
    from dataclasses import replace

    from loopkit.design import Control

    vm = _session()
    design = replace(vm.design, control=Control("peak-current", sense_gain=0.1))
    cm = LoopSession(design)
    assert cm.stage.n_corners == 21
    vm_targets, cm_targets = Targets("type3", 40e3, 60.0), Targets("type2", 20e3, 60.0)
    assert cm.run(cm_targets).feasible and vm.run(vm_targets).feasible
    fcs = iter(np.geomspace(15e3, 25e3, 10_000))
    benchmark(lambda: cm.run(Targets("type2", next(fcs), 60.0), preview=True))
    cm_moves, vm_moves = iter(np.geomspace(19e3, 21e3, 10_000)), iter(np.geomspace(38e3, 42e3, 10_000))
    t_cm = _median(lambda: cm.run(Targets("type2", next(cm_moves), 60.0), preview=True), 20)
    t_vm = _median(lambda: vm.run(Targets("type3", next(vm_moves), 60.0), preview=True), 20)
    t_build_cm = _median(lambda: LoopSession(design), 5)
    t_build_vm = _median(lambda: LoopSession(vm.design), 5)
    benchmark.extra_info.update({"current_mode_ms": t_cm * 1e3, "voltage_mode_ms": t_vm * 1e3,
                                 "ratio_cm_to_vm": t_cm / t_vm, "session_build_cm_ms": t_build_cm * 1e3,
                                 "session_build_vm_ms": t_build_vm * 1e3})
    print(f"\nslider path, 21 corners: current mode {t_cm * 1e3:.2f} ms, voltage mode {t_vm * 1e3:.2f} ms,"
          f" ratio {t_cm / t_vm:.2f}; session build {t_build_cm * 1e3:.1f} vs {t_build_vm * 1e3:.1f} ms")
