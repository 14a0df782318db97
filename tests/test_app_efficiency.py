"""The efficiency dialog shows the library's numbers (loopkit.efficiency) and follows the design.

The reference is loopkit's own path as ``loopkit efficiency`` uses it; the
dialog must show the same values, not compute its own.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from app.efficiency_view import EfficiencyDialog
from app.viewmodel import DesignModel
from loopkit import load_design
from loopkit.efficiency import efficiency, efficiency_curves

SAMPLE = Path(__file__).resolve().parents[1] / "sample_designs" / "fourswitch_automotive_9v.toml"


def _column(dialog, title):
    heads = [dialog.table.horizontalHeaderItem(j).text() for j in range(dialog.table.columnCount())]
    j = heads.index(title)
    return [dialog.table.item(k, j).text() for k in range(dialog.table.rowCount())]


def test_dialog_shows_the_library_values_and_follows_the_design(qapp, qtbot):
    model = DesignModel()
    model.open(SAMPLE)
    dialog = EfficiencyDialog(model)
    qtbot.addWidget(dialog)
    want = efficiency(load_design(SAMPLE))
    assert dialog.table.rowCount() == want.vin.size
    assert _column(dialog, "Eff %") == [f"{100 * e:.2f}" for e in want.efficiency]
    curves = efficiency_curves(load_design(SAMPLE))
    items = dialog.plot.plotItem.listDataItems()
    assert len(items) == curves.vin.size
    np.testing.assert_allclose(items[0].getData()[1], 100 * curves.efficiency[0])
    # a change of the design (no quiescent power) reaches the table
    changed = replace(model.design, losses=replace(model.design.losses, quiescent_w=None))
    assert model.propose(changed, "no controller loss")
    after = efficiency(changed)
    assert _column(dialog, "Eff %") == [f"{100 * e:.2f}" for e in after.efficiency]
    assert "quiescent" in dialog.notes.text()
    assert "quiescent (W)" not in [dialog.table.horizontalHeaderItem(j).text()
                                   for j in range(dialog.table.columnCount())]


def test_tools_menu_opens_it(qapp, qtbot, tmp_path):
    from app.window import MainWindow

    window = MainWindow(data_dir=tmp_path)
    qtbot.addWidget(window)
    window.open_path(SAMPLE, ask=False)
    window.findChild(type(window.menuBar().actions()[0]), "efficiency").trigger()
    dialog = window.findChild(EfficiencyDialog)
    assert dialog is not None and dialog.table.rowCount() == 12
