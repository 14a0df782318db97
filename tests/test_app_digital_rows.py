"""The app's sweep and tolerance-study dialogs on a digital design: no crash, the library's numbers shown.

The numbers themselves are checked against outside references in tests/test_digital_rows.py; here the
dialogs must run off the UI thread and show what :func:`loopkit.sweep.vin_sweep` and
:func:`loopkit.montecarlo.monte_carlo` give, with the controller that was kept said.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit import load_design
from loopkit.loop import apply_parts
from loopkit.montecarlo import monte_carlo, prepare_study
from loopkit.sweep import vin_sweep

DSP = "sample_designs/buck_dsp_5v.toml"


def _window(qtbot, tmp_path, monkeypatch, path):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    w = MainWindow(DesignModel(load_design(path)), data_dir=tmp_path / "appdata")
    w.show()
    qtbot.waitExposed(w)
    qtbot.waitUntil(lambda: w.model.result is not None and w.model.result.digital is not None
                    and w.model.result.digital.realisation is not None, timeout=30000)
    return w


def _close(w):
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()
    w.close()
    w.deleteLater()


def test_sweep_dialog_on_a_digital_design(qtbot, tmp_path, monkeypatch):
    from app.sweep import SweepDialog

    w = _window(qtbot, tmp_path, monkeypatch, DSP)
    try:
        dialog = SweepDialog(w.model, w)
        qtbot.addWidget(dialog)
        dialog.points.setValue(9)
        dialog.start()
        qtbot.waitUntil(lambda: dialog.data is not None or dialog.STOPPED in dialog.status.text(), timeout=60000)
        assert dialog.data is not None, dialog.status.text()
        design = w.model.design
        ref = vin_sweep(design, w.model.result, np.linspace(min(design.operating.vin), max(design.operating.vin), 9))
        np.testing.assert_array_equal(dialog.data["pm_deg"], ref.pm_deg)
        assert "Controller kept: the fixed-point controller" in dialog.status.text()
        dialog.close()
    finally:
        _close(w)


@pytest.mark.slow
def test_study_dialog_on_a_digital_design(qtbot, tmp_path, monkeypatch):
    from app.study_view import StudyDialog

    path = tmp_path / "dsp.toml"
    path.write_text(Path(DSP).read_text() + '\n[tolerances]\ninductance = "20%"\n')
    w = _window(qtbot, tmp_path, monkeypatch, str(path))
    try:
        dialog = StudyDialog(w.model, w.bode, w)
        qtbot.addWidget(dialog)
        dialog.draws.setValue(20)
        dialog.random_state.setValue(5)
        dialog.start()
        qtbot.waitUntil(lambda: dialog.data is not None or dialog.STOPPED in dialog.status.text(), timeout=60000)
        assert dialog.data is not None, dialog.status.text()
        study = prepare_study(apply_parts(w.model.design, w.model.result))
        ref = monte_carlo(study, 20, random_state=5)
        np.testing.assert_array_equal(dialog.data["mc"].margins.pm_deg, ref.margins.pm_deg)
        assert f"Yield {100 * ref.yield_fraction:.1f} %" in dialog.yield_label.text()
        assert "Controller kept: the fixed-point controller" in dialog.status.text()
        assert w.bode.envelope is not None
        dialog.close()
    finally:
        _close(w)


def test_study_dialog_without_tolerances_says_why(qtbot, tmp_path, monkeypatch):
    """The digital sample has no [tolerances]: the dialog shows the refusal, nothing crashes."""
    from app.study_view import StudyDialog

    w = _window(qtbot, tmp_path, monkeypatch, DSP)
    try:
        dialog = StudyDialog(w.model, w.bode, w)
        qtbot.addWidget(dialog)
        dialog.draws.setValue(10)
        dialog.start()
        qtbot.waitUntil(lambda: dialog.STOPPED in dialog.status.text(), timeout=60000)
        assert dialog.data is None
        assert "tolerances" in dialog.status.text()
        dialog.close()
    finally:
        _close(w)
