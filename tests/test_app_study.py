"""The app's tolerance study: off the UI thread, the library's numbers, the envelope on the Bode plot, cancel."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit import load_design
from loopkit.loop import apply_parts
from loopkit.montecarlo import monte_carlo, prepare_study

BUCK = "sample_designs/buck_24v_3v3.toml"


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    w = MainWindow(DesignModel(load_design(BUCK)), data_dir=tmp_path / "appdata")
    w.show()
    qtbot.waitExposed(w)
    qtbot.waitUntil(lambda: w.model.result is not None, timeout=30000)
    yield w
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()
    w.close()
    w.deleteLater()


def test_study_runs_off_thread_and_shows_the_library_numbers(window, qtbot):
    from app.study_view import StudyDialog

    dialog = StudyDialog(window.model, window.bode, window)
    qtbot.addWidget(dialog)
    dialog.draws.setValue(60)
    dialog.random_state.setValue(7)
    dialog.start()
    assert dialog.is_running() or dialog.data is not None  # the UI thread returned at once
    qtbot.waitUntil(lambda: dialog.data is not None, timeout=60000)
    mc = dialog.data["mc"]
    study = prepare_study(apply_parts(window.model.design, window.model.result))
    ref = monte_carlo(study, 60, random_state=7)
    np.testing.assert_array_equal(mc.margins.pm_deg, ref.margins.pm_deg)
    assert f"Yield {100 * ref.yield_fraction:.1f} %" in dialog.yield_label.text()
    assert dialog.table.rowCount() == len(study.quantities)
    assert window.bode.envelope is not None  # shaded on the main Bode plot
    window.model.undo_stack.setClean()
    dialog.close()


def test_study_cancel_keeps_what_finished(window, qtbot):
    from app.study_view import StudyDialog

    dialog = StudyDialog(window.model, window.bode, window)
    qtbot.addWidget(dialog)
    dialog.draws.setValue(200000)
    dialog.start()
    qtbot.waitUntil(lambda: dialog.progress.value() > 0, timeout=60000)
    dialog.cancel()
    qtbot.waitUntil(lambda: not dialog.is_running(), timeout=60000)
    assert dialog.data is not None and dialog.data["mc"].cancelled
    assert 0 < dialog.data["mc"].n < 200000
    dialog.close()
