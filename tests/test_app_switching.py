"""The switching check in the app: off the UI thread, with progress and cancel, drawing the library's numbers.

Reference values: loopkit.switching called directly on the same loop result (the app must show
those numbers, computed by the same code).
"""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = [pytest.mark.gui, pytest.mark.slow]

from loopkit import switching as sw

SAMPLES = __import__("conftest").SAMPLES
BUCK24 = next(p for p in SAMPLES if p.stem == "buck_24v_3v3")


@pytest.fixture
def window(main_window):
    return main_window


def test_switching_check_runs_off_thread_and_shows_the_library_values(window, qtbot):
    assert window.open_path(BUCK24, ask=False)
    qtbot.waitUntil(lambda: window.model.result is not None and not window.model.pending, timeout=30000)
    dialog = window.open_switching()
    qtbot.addWidget(dialog)
    assert dialog.is_running() or dialog.data is not None  # the UI thread is free while it runs
    qtbot.waitUntil(lambda: dialog.data is not None, timeout=240000)
    assert dialog.progress.value() == 100
    k = dialog.data["corner"]
    ss = sw.steady_state(sw.closed_loop_setup(window.model.result), [k])
    np.testing.assert_allclose(dialog.data["steady"].vout_v, ss.vout_v, rtol=1e-9)
    lg = dialog.data["loop_gain"]
    points = [item for item in dialog.mag_plot.listDataItems() if item.opts.get("symbol") == "o"]
    np.testing.assert_allclose(points[0].yData, 20 * np.log10(np.abs(lg.t_switching[0])))
    dialog.start()
    dialog.cancel()
    qtbot.waitUntil(lambda: not dialog.is_running(), timeout=60000)
    assert "cancelled" in dialog.status.text() or dialog.progress.value() == 100
    dialog.close()


def test_switching_check_of_a_digital_design_says_whether_it_hunts(window, qtbot, tmp_path):
    """The digital sample as built: the dialog's status carries the library's limit-cycle verdict, and a
    screenshot is written for a look."""
    dsp = next(p for p in SAMPLES if p.stem == "buck_dsp_5v")
    assert window.open_path(dsp, ask=False)
    qtbot.waitUntil(lambda: window.model.result is not None and not window.model.pending, timeout=30000)
    dialog = window.open_switching()
    qtbot.addWidget(dialog)
    qtbot.waitUntil(lambda: dialog.data is not None, timeout=240000)
    ss = dialog.data["steady"]
    assert ss.limit_cycle is not None and not ss.limit_cycle.hunting[0]
    assert "settles on one PWM value" in dialog.status.text()
    dialog.grab().save(str(tmp_path / "switching_digital.png"))
    dialog.close()
