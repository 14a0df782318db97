"""The window under a seeded random sequence of user inputs (pytest-qt, offscreen).

Inputs: crossover, phase-margin and boost-split slider moves (drags and
steps), values typed into the target boxes and the design form (valid and
invalid), undo and redo, network and series changes, capacitor banks added
and removed, the input-voltage scrub, and now and then another sample opened.
Checked after every input: no exception escaped into Qt, no message the user
sees says "internal error", and the shown targets are the model's.  A value
that loopkit fails on inside (instead of refusing it with a DesignError) is
refused at its field by the app; the run then ends as an expected failure
naming those inputs, until the library's bounds refuse them (issue 8, s. 1).  The time
each input takes to process (handlers and repaint) is collected and its 99th
percentile printed (goal < 100 ms, reported, never asserted).

The default is a short run (a few seconds).  A longer one::

    LOOPKIT_RANDOM_INPUTS=3000 LOOPKIT_RANDOM_SEED=7 pytest tests/test_app_random.py -s
"""

from __future__ import annotations

import math
import os
import random
import time
from typing import ClassVar

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtWidgets import QApplication, QMessageBox

from app.fields import ValueEdit
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit.design import NETWORKS

SAMPLES = __import__("conftest").SAMPLES
INPUTS = int(os.environ.get("LOOPKIT_RANDOM_INPUTS", "60"))
SEED = int(os.environ.get("LOOPKIT_RANDOM_SEED", "20261203"))
BAD_TEXTS = ("abc", "-1", "0", "1e99", "nan", "inf", "4.7uF", "", "1,5", "10 MHz Hz", "1e-30", "９")


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path))

    def refuse(*args, **kwargs):
        raise AssertionError(f"unexpected dialog: {args[1:3]}")

    for name in ("question", "warning", "information", "critical", "about"):
        monkeypatch.setattr(QMessageBox, name, refuse)
    w = MainWindow(DesignModel(), data_dir=tmp_path)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()
    w.close()
    w.deleteLater()


class Inputs:
    """One random user input per call; each returns a short name for the report."""

    def __init__(self, window, rng: random.Random):
        self.w, self.rng = window, rng

    def _slider(self, slider, drag: bool) -> None:
        lo, hi = slider.minimum(), slider.maximum()
        if drag:
            slider.setSliderDown(True)
            for _ in range(self.rng.randint(1, 4)):
                slider.setValue(min(max(slider.value() + self.rng.randint(-30, 30), lo), hi))
            slider.setSliderDown(False)
        else:
            slider.setValue(min(max(slider.value() + self.rng.choice((-5, -1, 1, 5)), lo), hi))

    def fc_slider(self):
        self._slider(self.w.targets_bar.fc_slider, self.rng.random() < 0.6)

    def pm_slider(self):
        self._slider(self.w.targets_bar.pm_slider, self.rng.random() < 0.5)

    def split_slider(self):
        if self.w.targets_bar.split_slider.isEnabled():
            self._slider(self.w.targets_bar.split_slider, self.rng.random() < 0.5)

    def _type(self, edit: ValueEdit) -> None:
        if self.rng.random() < 0.35:
            text = self.rng.choice(BAD_TEXTS)
        else:
            value = edit.value_shown if isinstance(edit.value_shown, float) and edit.value_shown else 1.0
            text = repr(float(value) * math.exp(self.rng.uniform(-0.7, 0.7)))
        edit.setText(text)
        edit.editingFinished.emit()

    def target_box(self):
        bar = self.w.targets_bar
        self._type(self.rng.choice((bar.fc_edit, bar.pm_edit)))

    def form_field(self):
        form = self.w.form
        edits = [w for k, w in form._widgets.items() if isinstance(w, ValueEdit) and w.isVisibleTo(form)
                 and k not in ("operating.vin_min", "operating.vin_max")]
        self._type(self.rng.choice(edits))

    def undo(self):
        self.w.model.undo_stack.undo()

    def redo(self):
        self.w.model.undo_stack.redo()

    def network(self):
        box = self.w.targets_bar.network
        i = box.findData(self.rng.choice(NETWORKS))
        box.setCurrentIndex(i)
        box.activated.emit(i)

    def series(self):
        box = self.rng.choice((self.w.parts.resistor_series, self.w.parts.capacitor_series))
        i = self.rng.randrange(box.count())
        box.setCurrentIndex(i)
        box.activated.emit(i)

    def add_bank(self):
        self.w.model.add_capacitor_bank()

    def remove_bank(self):
        n = len(self.w.model.design.stage.output_caps)
        self.w.model.remove_capacitor_bank(self.rng.randrange(n + 1) if self.rng.random() < 0.2 else n - 1)

    def vin_scrub(self):
        s = self.w.targets_bar.vin_slider
        s.setValue(self.rng.randint(s.minimum(), s.maximum()))

    def side_tab(self):
        tabs = self.w.side_tabs
        tabs.setCurrentIndex(1 - tabs.currentIndex())

    def open_sample(self):
        assert self.w.open_path(self.rng.choice(SAMPLES), ask=False)

    WEIGHTS: ClassVar[dict] = {"fc_slider": 6, "pm_slider": 4, "split_slider": 2, "target_box": 4, "form_field": 6, "undo": 3,
                               "redo": 2, "network": 2, "series": 1, "add_bank": 1, "remove_bank": 1,
                               "vin_scrub": 1, "side_tab": 1, "open_sample": 1}

    def next(self) -> str:
        names = list(self.WEIGHTS)
        name = self.rng.choices(names, weights=[self.WEIGHTS[n] for n in names])[0]
        getattr(self, name)()
        return name


def test_random_inputs_never_an_internal_error(window, qtbot):
    model = window.model
    messages: list[str] = []
    model.field_invalid.connect(lambda field, msg: messages.append(msg))
    model.compute_failed.connect(messages.append)
    rng = random.Random(SEED)
    assert window.open_path(rng.choice(SAMPLES), ask=False)
    inputs = Inputs(window, rng)
    app = QApplication.instance()
    times: dict[str, list[float]] = {}
    cpu: list[float] = []
    done = []
    for _ in range(INPUTS):
        t0, c0 = time.perf_counter(), time.thread_time()
        with qtbot.captureExceptions() as raised:
            name = inputs.next()
            app.processEvents()  # the views and the repaint the input causes
        elapsed = time.perf_counter() - t0
        cpu.append(time.thread_time() - c0)
        done.append(name)
        assert not raised, (done[-5:], raised)
        times.setdefault(name, []).append(elapsed)
        bad = [m for m in messages if "internal error" in m.lower()]
        assert not bad, (done[-5:], bad)
        status = window.statusBar().currentMessage()
        assert "internal error" not in status.lower(), (done[-5:], status)
        assert "Traceback" not in status
        if not model.previewing:  # what the bar shows is what the model holds
            edit = window.targets_bar.fc_edit
            assert edit.value_shown == model.targets.fc_hz or edit.invalid, (done[-6:], edit.value_shown)
    qtbot.waitUntil(lambda: not model.pending, timeout=30000)
    every = np.concatenate([np.asarray(v) for v in times.values()]) * 1e3
    p99 = float(np.percentile(every, 99))
    slow = sorted(((float(max(v)) * 1e3, k) for k, v in times.items()), reverse=True)[:4]
    print(f"\n{every.size} random inputs (seed {SEED}): per input median {np.median(every):.1f} ms,"
          f" p99 {p99:.1f} ms (goal < 100 ms), max {every.max():.1f} ms, {int((every > 100).sum())} over 100 ms;"
          f" slowest kinds {', '.join(f'{k} {t:.0f} ms' for t, k in slow)}; {len(messages)} inputs refused;"
          f" in UI-thread CPU time: median {np.median(cpu) * 1e3:.1f} ms, p99 {np.percentile(cpu, 99) * 1e3:.1f} ms")
    assert every.size == INPUTS
    assert len(set(done)) >= min(6, INPUTS // 10)  # the sequence exercised many kinds of input
    if model.unexpected_errors:
        # refused at the field, never shown as an internal error; but loopkit should have refused the value
        # itself with a DesignError (issue 8, section 1: physical bounds at the door)
        pytest.xfail(f"{len(model.unexpected_errors)} inputs reached an exception inside loopkit instead of a"
                     f" DesignError: {model.unexpected_errors[:3]}")
