"""The optocoupler's bias voltages in the app's form: shown for the opto network, edited into the design.

The check of the bias itself is in tests/test_opto_bias.py (against ngspice); here only that the form
carries the four optional keys to the design and back (empty = the default) and that the design's
error finding shows when the entered pull-up supply leaves no bias.
"""

from __future__ import annotations

import pytest

from tests.test_app_window import make_window, no_modal_dialogs, open_sample, window  # noqa: F401

pytestmark = pytest.mark.gui

SAMPLE = "sample_designs/flyback_48v_12v.toml"
KEYS = ("v_pullup", "v_pin", "v_led", "v_shunt_min")


def _enter(form, key: str, text: str) -> None:
    w = form._widgets[f"compensator.opto.{key}"]
    w.setText(text)
    w.editingFinished.emit()


def test_bias_fields_edit_the_design(window):  # noqa: F811
    model = open_sample(window, SAMPLE)
    form = window.form
    for key in KEYS:
        assert form._widgets[f"compensator.opto.{key}"].isVisibleTo(form), key
    assert not any(f.code == "opto-bias" for f in model.result.findings)
    # a 12 V pull-up: 9.5 V across 4.7k takes 2 mA, the LED 4 mA, 19 V across R_LED 4.7k: no bias
    _enter(form, "v_pullup", "12")
    assert model.design.compensator.opto["v_pullup"] == 12.0
    found = [f for f in model.result.findings if f.code == "opto-bias"]
    assert len(found) == 1 and found[0].severity == "error"
    _enter(form, "v_pullup", "")  # empty: back to the default
    assert "v_pullup" not in model.design.compensator.opto
    assert not any(f.code == "opto-bias" for f in model.result.findings)
    _enter(form, "v_pin", "6")  # above the 5 V pull-up: refused, naming the field
    assert "v_pin" not in model.design.compensator.opto
    assert form._widgets["compensator.opto.v_pin"].property("invalid") is True
