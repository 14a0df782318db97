"""The app's measured-data window and review-report export (pytest-qt, offscreen).

The window must draw what loopkit computes (``loopkit.measured_overlay``: the app holds no
formula), follow the chosen corner and the design, and refuse a bad file with the loader's
message; the report the app exports is loopkit's report of the same result, with the open
measurement in it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtWidgets import QMessageBox

from app.testing import settle
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit.measured import read_measurement
from loopkit.measured_overlay import measured_overlay

ROOT = Path(__file__).resolve().parents[1]
BOOST = ROOT / "sample_designs" / "boost_liion_5v.toml"
LOOP_CSV = ROOT / "tests" / "data" / "boost_loop_3v6_0a75.csv"


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    warnings = []
    monkeypatch.setattr(QMessageBox, "warning", lambda *a, **k: warnings.append(a[2]) or QMessageBox.Ok)
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: QMessageBox.Discard)  # closing an edited design
    w = MainWindow(DesignModel(), data_dir=tmp_path / "appdata")
    qtbot.addWidget(w)
    w.show()
    assert w.open_path(BOOST, ask=False)
    settle(0.1)
    w.warnings = warnings
    return w


def test_measured_window_draws_loopkits_overlay_and_follows_the_corner(window):
    mw = window.open_measured(str(LOOP_CSV), "loop", 4)
    assert mw is not None and mw.isVisible()
    expected = measured_overlay(window.model.result, read_measurement(LOOP_CSV, "loop"), 4)
    x, y = mw.diff_db.getData()
    np.testing.assert_allclose(x, np.log10(expected.f_hz))  # pyqtgraph gives x in its log view
    np.testing.assert_allclose(y, expected.diff_db)
    np.testing.assert_allclose(mw.meas_phase.getData()[1], expected.meas_phase_deg)
    assert "Measured: fc 43.2kHz" in mw.summary.text() and "50Hz to 500kHz" in mw.summary.text()
    mw.set_corner(1)
    other = measured_overlay(window.model.result, read_measurement(LOOP_CSV, "loop"), 1)
    np.testing.assert_allclose(mw.pred_mag.getData()[1], other.pred_mag_db)
    assert "corner #1" in mw.summary.text()


def test_measured_window_follows_a_design_change(window, qtbot):
    mw = window.open_measured(str(LOOP_CSV), "loop", 4)
    before = mw.pred_mag.getData()[1].copy()
    assert window.model.set_targets("fc", fc_hz=15e3)
    settle(0.05)
    after = mw.pred_mag.getData()[1]
    np.testing.assert_allclose(after, mw.overlay.pred_mag_db)
    assert not np.allclose(before, after)


def test_a_bad_measurement_file_is_refused_with_the_loaders_message(window, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n10,1,2\n20,x,3\n", encoding="utf-8")
    assert window.open_measured(str(bad), "loop") is None
    assert window.warnings and "line 3" in window.warnings[-1] and "x" in window.warnings[-1]


@pytest.mark.slow
def test_exported_report_is_loopkits_with_the_open_measurement(window, tmp_path):
    window.open_measured(str(LOOP_CSV), "loop", 4)
    out = tmp_path / "review.html"
    window.export_report(str(out))
    text = out.read_text(encoding="utf-8")
    assert "Measured loop against the prediction" in text and "corner #4 (3.6V in, 750mA load)" in text
    assert "Li-ion cell to 5 V / 1.5 A boost" in text
