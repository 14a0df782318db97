"""Benchmark: from a slider move to the repainted plot, and the app's cold start.

21 corners (7 input voltages x 3 loads of the 24 V buck sample) x 1000
frequencies, window 1400 x 900, offscreen.  One move = the crossover slider's
value changes while it is held down (the drag path: re-synthesis, margins at
every corner, table, read-out, every curve updated with setData), then
``QApplication.processEvents()`` paints every widget that changed; a paint
counter on the plot's viewport checks that the plot itself was repainted
(if not, ``viewport().repaint()`` is forced and counted).  Reported over 200 moves: median and 95th percentile,
split into library, view updates and painting, for a drag back and forth and
a drag one way, with the bare ``LoopSession.run`` of the same targets in the
same process as the reference (ratio).  Cold start:
a subprocess starts the app on a sample design and prints when the plot has
first been painted; wall time from launch.  Reported, never asserted as times.
Run: pytest tests/benchmarks/test_bench_gui.py --benchmark-enable -s
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from loopkit import load_design
from loopkit.design import Operating
from loopkit.loop import LoopSession

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "sample_designs" / "buck_24v_3v3.toml"
MOVES = 200


def _design():
    design = load_design(SAMPLE)
    return replace(design, operating=Operating(3.3, tuple(np.linspace(18, 32, 7)), (0.3, 1.5, 3.0)))


def _stats(times) -> dict:
    t = np.asarray(times) * 1e3
    return {"median_ms": round(float(np.median(t)), 2), "p95_ms": round(float(np.percentile(t, 95)), 2),
            "max_ms": round(float(np.max(t)), 2)}


def _window(tmp_path):
    from app.testing import settle
    from app.viewmodel import DesignModel
    from app.window import MainWindow

    model = DesignModel(_design())
    window = MainWindow(model, data_dir=tmp_path)
    window.resize(1400, 900)
    window.show()
    settle(0.3)
    assert model.result.stage.n_corners == 21 and model.result.f_hz.size == 1000
    return model, window


def _moves(model, window, positions, clock=time.perf_counter) -> dict:
    """Move the crossover slider (held down) through ``positions``; per move: total, library, view updates,
    painting.  Library = ``DesignModel._compute`` (LoopSession.run, or a kept result); view updates = the rest
    of ``DesignModel._apply`` (every view's handler); painting = everything else until every widget that
    changed has been painted (``processEvents``, plus a forced repaint when the plot was not painted)."""
    from PySide6.QtCore import QEvent, QObject
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    slider = window.targets_bar.fc_slider
    viewport = window.bode.canvas.viewport()
    lib, applied = [], []
    compute, apply = model._compute, model._apply

    def timed_compute(design):
        t0 = clock()
        try:
            return compute(design)
        finally:
            lib.append(clock() - t0)

    def timed_apply(design):
        t0 = clock()
        try:
            apply(design)
        finally:
            applied.append(clock() - t0)

    class PaintCount(QObject):
        n = 0

        def eventFilter(self, obj, event):
            if event.type() == QEvent.Paint:
                PaintCount.n += 1
            return False

    counter = PaintCount()
    viewport.installEventFilter(counter)
    model._compute, model._apply = timed_compute, timed_apply
    out = {"total": [], "library": [], "views": [], "painting": []}
    forced = 0
    slider.setSliderDown(True)
    try:
        for pos in positions:
            n_lib, n_apply, before = len(lib), len(applied), PaintCount.n
            t0 = clock()
            slider.setValue(pos)  # re-synthesis, margins, every view updated
            app.processEvents()  # every widget repaints (the plot included)
            if PaintCount.n == before:
                viewport.repaint()
                forced += 1
            total = clock() - t0
            in_lib, in_apply = sum(lib[n_lib:]), sum(applied[n_apply:])
            out["total"].append(total)
            out["library"].append(in_lib)
            out["views"].append(in_apply - in_lib)
            out["painting"].append(total - in_apply)
    finally:
        slider.setSliderDown(False)
        model._compute, model._apply = compute, apply
        viewport.removeEventFilter(counter)
    out["forced"] = forced
    return out


def test_bench_slider_to_repaint(qtbot, tmp_path, monkeypatch, benchmark):
    """Two drags of 200 moves: back and forth over 80 slider steps (positions repeat, as a hand's drag does;
    kept results are reused) and one way over 200 new steps (every move a library run)."""
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path))
    model, window = _window(tmp_path)
    slider = window.targets_bar.fc_slider
    start = slider.value()
    back_and_forth = [start + round(40 * np.sin(2 * np.pi * k / 50)) for k in range(1, MOVES + 1)]
    back_and_forth = [p if p != back_and_forth[i - 1] else p + 1 for i, p in enumerate(back_and_forth)]
    one_way = [start - 100 + k for k in range(MOVES + 1) if start - 100 + k != start]
    report = {}
    # the same one-way drag timed in CPU time of the UI thread: what the moves cost when the machine's other
    # work does not take the cores away (a shared, loaded machine inflates wall time, not this much)
    for name, positions, clock in (("back_and_forth", back_and_forth, time.perf_counter),
                                   ("one_way", one_way, time.perf_counter),
                                   ("one_way_cpu_time", one_way[::-1], time.thread_time)):
        slider.setValue(start)
        model.undo_stack.clear()
        model._kept.clear()
        parts = _moves(model, window, positions, clock)
        report[name] = {k: _stats(v) for k, v in parts.items() if k != "forced"}
        report[name]["forced_repaints"] = parts["forced"]
        assert model.undo_stack.count() == 1

    # reference in the same process: the library's run for the same targets, no Qt
    session = LoopSession(model.design)
    targets = [replace(model.targets, fc_hz=window.targets_bar.slider_to_fc(p)) for p in one_way]
    run_times = []
    for t in targets:
        t0 = time.perf_counter()
        session.run(t)
        run_times.append(time.perf_counter() - t0)
    run = _stats(run_times)
    benchmark.extra_info.update({**report, "loop_run_reference": run, "corners": 21, "frequencies": 1000})
    print(f"\nslider move -> repainted window, {MOVES} moves, 21 corners x 1000 f (goal median 16 / p95 33 ms):")
    for name, r in report.items():
        print(f"  {name:15s} total median {r['total']['median_ms']} ms, p95 {r['total']['p95_ms']} ms;"
              f" split (medians) library {r['library']['median_ms']}, view updates {r['views']['median_ms']},"
              f" painting {r['painting']['median_ms']} ms; forced repaints {r['forced_repaints']}")
    print(f"  LoopSession.run alone median {run['median_ms']} ms, p95 {run['p95_ms']} ms;"
          f" ratio one-way move / run {report['one_way']['total']['median_ms'] / run['median_ms']:.2f}")
    benchmark.pedantic(lambda: (slider.setValue(start), window.bode.canvas.viewport().repaint()), rounds=1,
                       iterations=1)
    model.undo_stack.setClean()
    window.close()


def _cold_start(env) -> tuple[float, float, float]:
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "app", str(SAMPLE)], env=env, capture_output=True, text=True,
                          timeout=60, cwd=ROOT, check=False)
    wall = time.perf_counter() - t0
    lines = dict(ln.split()[:2] for ln in proc.stdout.splitlines() if ln.startswith(("first-plot", "first-window")))
    assert "first-plot" in lines and "first-window" in lines, proc.stderr[-2000:]
    return wall, float(lines["first-window"]), float(lines["first-plot"])


def test_bench_cold_start(tmp_path, benchmark):
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", LOOPKIT_APP_DIR=str(tmp_path), LOOPKIT_GUI_TIME_START="1")
    runs = [_cold_start(env) for _ in range(3)]
    # reference in the same run: a bare interpreter that imports numpy and exits
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", "import numpy"], check=True, timeout=60)
    bare = time.perf_counter() - t0
    walls = sorted(r[0] for r in runs)
    window = sorted(r[1] for r in runs)
    plot = sorted(r[2] for r in runs)
    benchmark.extra_info.update({"cold_start_wall_s": [round(w, 3) for w in walls],
                                 "first_window_s": [round(w, 3) for w in window],
                                 "first_plot_s": [round(w, 3) for w in plot],
                                 "bare_python_numpy_s": round(bare, 3),
                                 "ratio_start_over_bare": round(walls[1] / bare, 2)})
    print(f"\ncold start (after the interpreter loaded the app module): first window median {window[1]:.2f} s,"
          f" first painted plot median {plot[1]:.2f} s; launch to exit {walls[1]:.2f} s"
          f" (runs {', '.join(f'{w:.2f}' for w in walls)}); bare python+numpy {bare:.2f} s")
    benchmark.pedantic(lambda: None, rounds=1, iterations=1)
