"""The app's exported review of a digital design carries the sampled loop's load step (pytest-qt, offscreen).

The app computes nothing itself: the page's step figures are those of
:func:`loopkit.timeresponse.step_response` on the library's own result with the designed controller kept
at the step's corners (:func:`loopkit.digital_step.hold_controller`); the step itself is checked against
outside references in tests/test_digital_step.py.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from app.report_options import ReportOptions
from app.testing import settle
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit import load_design
from loopkit.digital_step import hold_controller
from loopkit.loop import design_loop
from loopkit.report import default_load_step
from loopkit.timeresponse import step_response
from loopkit.units import format_value

ROOT = Path(__file__).resolve().parents[1]
DSP = ROOT / "sample_designs" / "buck_dsp_5v.toml"


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    w = MainWindow(DesignModel(), data_dir=tmp_path / "appdata")
    qtbot.addWidget(w)
    w.show()
    assert w.open_path(DSP, ask=False)
    settle(0.3)
    yield w
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()


def test_exported_review_of_a_digital_design_has_its_sampled_load_step(window, tmp_path):
    out = tmp_path / "review.html"
    window.export_report(str(out), ReportOptions(efficiency=False))
    text = out.read_text(encoding="utf-8")
    assert '<section id="step">' in text
    expected = design_loop(load_design(DSP))
    a, b = default_load_step(expected.design)
    moved = replace(expected.design, operating=replace(expected.design.operating, load=(a,)))
    sr = step_response(hold_controller(expected, moved), "load", b - a)
    table = text[text.index("Step figures per corner"):]
    for k in range(sr.peak_v.size):
        assert f'<td class="n">{k}</td><td class="n">{format_value(sr.peak_v[k], "V")[:-1]}</td>' in table
