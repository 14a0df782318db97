"""The app's choice of the review report's optional sections (pytest-qt, offscreen).

The dialog only collects choices; the sections are loopkit's
(:func:`loopkit.report.sections.review_sections`, the call ``loopkit report`` makes), so the
exported page carries the same efficiency numbers as ``loopkit.efficiency.efficiency`` of the
design the window shows (the numbers themselves are checked against the CLI's JSON in
test_report_sections.py).
"""

from __future__ import annotations

from pathlib import Path

import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtWidgets import QFileDialog, QMessageBox

from app.report_options import ReportOptions, ReportOptionsDialog
from app.testing import settle
from app.viewmodel import DesignModel
from app.window import MainWindow

ROOT = Path(__file__).resolve().parents[1]
BUCK = ROOT / "sample_designs" / "buck_24v_3v3.toml"


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    monkeypatch.setattr(QMessageBox, "warning", lambda *a, **k: QMessageBox.Ok)
    w = MainWindow(DesignModel(), data_dir=tmp_path / "appdata")
    qtbot.addWidget(w)
    w.show()
    assert w.open_path(BUCK, ask=False)
    settle(0.1)
    return w


def test_dialog_offers_the_tolerance_study_only_with_a_tolerances_table(qtbot):
    d = ReportOptionsDialog(has_tolerances=False, has_parts=True)
    qtbot.addWidget(d)
    assert not d.tolerance.isEnabled() and d.efficiency.isChecked() and not d.switching.isChecked()
    assert d.options() == ReportOptions()
    d = ReportOptionsDialog(has_tolerances=True, has_parts=False)
    qtbot.addWidget(d)
    assert not d.switching.isEnabled()
    d.tolerance.setChecked(True)
    d.draws.setValue(300)
    d.random_state.setValue(9)
    d.efficiency.setChecked(False)
    d.robust.setChecked(True)
    assert d.options() == ReportOptions(efficiency=False, tolerance_draws=300, random_state=9, switching=False,
                                        robust=True)
    assert d.options().keywords() == {"efficiency": False, "tolerance_draws": 300, "random_state": 9,
                                      "switching": False, "robust": True}
    d.tolerance.setChecked(False)
    assert d.options().tolerance_draws == 0 and not d.options().robust and not d.draws.isEnabled()


def test_export_dialog_passes_the_chosen_sections(window, monkeypatch, tmp_path):
    out = str(tmp_path / "review.html")
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (out, "Report page (*.html)"))
    monkeypatch.setattr(ReportOptionsDialog, "exec", lambda self: (self.switching.setChecked(True),
                                                                  ReportOptionsDialog.Accepted)[1])
    calls = []
    monkeypatch.setattr(window, "export_report", lambda path, options=None: calls.append((path, options)))
    window.report_dialog()
    assert calls == [(out, ReportOptions(switching=True))]
    monkeypatch.setattr(ReportOptionsDialog, "exec", lambda self: ReportOptionsDialog.Rejected)
    window.report_dialog()
    assert len(calls) == 1  # cancelled: nothing written


@pytest.mark.slow
def test_exported_report_has_the_efficiency_section_only_when_chosen(window, tmp_path):
    from loopkit.efficiency import efficiency

    out = tmp_path / "review.html"
    window.export_report(str(out), ReportOptions())
    text = out.read_text(encoding="utf-8")
    eff = efficiency(window.model.design)
    assert "<h2>Efficiency</h2>" in text and "Tolerances and yield" not in text and "Switching check" not in text
    assert all(f"{100 * e:.2f}" in text for e in eff.efficiency)
    window.export_report(str(out), ReportOptions(efficiency=False))
    assert "<h2>Efficiency</h2>" not in out.read_text(encoding="utf-8")
