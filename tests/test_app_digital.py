"""The app with a digital design: scheme selector, [digital] fields, coefficient table, findings.

The numbers shown are checked against the library's own result for the same design (the app computes
nothing itself); the library's numbers are checked against outside references in
tests/test_digital_scheme.py.
"""

from __future__ import annotations

import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from app.testing import settle
from loopkit import load_design
from loopkit.loop import design_loop

ROOT = __import__("conftest").ROOT
DSP = ROOT / "sample_designs" / "buck_dsp_5v.toml"


@pytest.fixture
def window(main_window):
    return main_window


def test_digital_design_shows_its_fields_coefficients_and_nyquist_grid(window):
    assert window.open_path(DSP, ask=False)
    settle(0.3)
    result = window.model.result
    expected = design_loop(load_design(DSP))
    assert result.digital is not None
    assert result.f_hz[-1] == pytest.approx(0.5 * expected.digital.fs_hz)  # the Bode plot ends at fs/2
    forms = window.form
    assert forms.widget_for("control.scheme").value() == "digital"
    assert forms.widget_for("digital.form").value() == "type3"
    parts = window.parts
    parts.show()
    parts._on_results_changed(result)
    table = parts.table
    names = [table.item(r, 0).text() for r in range(table.rowCount())]
    values = [float(table.item(r, 1).text()) for r in range(table.rowCount())]
    assert names[0] == "b0" and names[-1].startswith("a")
    b = list(expected.digital.b)
    assert values[: len(b)] == pytest.approx(b, rel=1e-9, abs=1e-12)
    assert "Zeros (z)" in parts.roots.text()
