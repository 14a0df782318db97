"""The view-model in plain Python: results equal the library path, edits, undo, files.

The reference for every number is loopkit's own path as the command line
uses it (:func:`loopkit.loop.design_loop` on the design file): the app must
show the same margins and parts, not its own computation.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

from app.viewmodel import DesignModel
from loopkit import DesignError, load_design
from loopkit.loop import Targets, design_loop


def same_margins(a, b) -> None:
    for name in ("fc_hz", "pm_deg", "gm_db", "f180_hz", "stable"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


def same_result(got, want) -> None:
    assert got.feasible == want.feasible
    assert got.parts == want.parts
    assert got.parts_exact == want.parts_exact
    assert got.worst_corner == want.worst_corner
    if want.feasible:
        same_margins(got.margins, want.margins)
        same_margins(got.margins_exact, want.margins_exact)
        np.testing.assert_array_equal(got.loop_resp, want.loop_resp)


@pytest.fixture
def model(qapp):
    return DesignModel()


SOME = [p for p in __import__("conftest").SAMPLES if p.stem.startswith(("buck", "flyback"))]


@pytest.fixture(params=SOME, ids=[p.stem for p in SOME])
def some_path(request):
    """Two samples (op-amp Type III and optocoupler Type II) for the checks that need not run on all six."""
    return request.param


class Spy:
    """Collects a signal's emissions."""

    def __init__(self, signal):
        self.calls = []
        signal.connect(lambda *a: self.calls.append(a))


def test_sample_opens_with_library_results(model, sample_path):
    model.open(sample_path)
    same_result(model.result, design_loop(load_design(sample_path)))
    assert not model.dirty
    assert model.path == str(sample_path.resolve())


def test_targets_change_reruns_session_only(model, sample_path):
    model.open(sample_path)
    session = model.session
    spy_design = Spy(model.design_changed)
    fc = model.targets.fc_hz * 1.25
    assert model.set_targets("fc", fc_hz=fc)
    assert model.session is session  # no new power-stage analysis
    assert spy_design.calls == []
    want = design_loop(load_design(sample_path), replace(Targets.from_design(load_design(sample_path)), fc_hz=fc))
    same_result(model.result, want)
    assert model.dirty


def test_design_change_builds_new_session(model, some_path):
    model.open(some_path)
    session = model.session
    L = model.design.stage.inductance
    assert model.edit({"stage.inductance": L * 1.5}, "L")
    assert model.session is not session
    assert model.design.stage.inductance == L * 1.5
    same_result(model.result, design_loop(model.design))


def test_engineering_text_is_parsed_by_the_file_parser(model, some_path):
    model.open(some_path)
    assert model.edit({"stage.fsw": "250kHz"}, "fsw")
    assert model.design.stage.fsw == 250e3
    assert model.edit({"stage.output_caps[0].capacitance": "47uF"}, "C")
    assert model.design.stage.output_caps[0].capacitance == 47e-6


@pytest.mark.parametrize("field, value, words", [
    ("stage.inductance", "-4.7u", "must be > 0"),
    ("stage.inductance", "4.7uF", "expected a value in H"),
    ("stage.fsw", "abc", "not a number"),
    ("stage.output_caps[0].esr", "-1m", "must be >= 0"),
    ("operating.load", ["1", "x"], "operating.load[1]"),
])
def test_invalid_edit_names_field_and_keeps_design(model, some_path, field, value, words):
    model.open(some_path)
    before, result = model.design, model.result
    spy = Spy(model.field_invalid)
    assert not model.edit({field: value}, "bad")
    assert model.design is before and model.result is result
    assert not model.dirty
    assert len(spy.calls) == 1
    got_field, message = spy.calls[0]
    assert got_field == field
    assert words in message
    with pytest.raises(DesignError) as err:  # the same message the library gives for the same text
        from loopkit.designfile import design_from_dict, design_to_dict
        doc = design_to_dict(before)
        from app.viewmodel import _set_path
        _set_path(doc, field, value)
        design_from_dict(doc)
    assert str(err.value) == message


def test_stage_level_error_is_rejected(model):
    """A buck cannot make 3.3 V from 2 V: analyse_stage's message, design kept."""
    model.open(next(p for p in __import__("conftest").SAMPLES if p.stem.startswith("buck")))
    before = model.design
    spy = Spy(model.field_invalid)
    assert not model.edit({"operating.vin": ["2", "24"]}, "vin")
    assert model.design is before
    assert "operating.vin[0]" in spy.calls[0][1] and "cannot make" in spy.calls[0][1]


def test_undo_redo(model, some_path):
    model.open(some_path)
    d0 = model.design
    model.edit({"stage.dcr": "50m"}, "dcr")
    d1 = model.design
    model.set_targets("pm", pm_deg=50.0)
    assert model.undo_stack.count() == 2
    model.undo_stack.undo()
    assert model.design == d1
    model.undo_stack.undo()
    assert model.design == d0 and not model.dirty
    same_result(model.result, design_loop(d0))
    model.undo_stack.redo()
    model.undo_stack.redo()
    assert model.targets.pm_deg == 50.0
    same_result(model.result, design_loop(model.design))


def test_preview_is_one_undo_step(model, some_path):
    model.open(some_path)
    fc0 = model.targets.fc_hz
    model.begin_preview()
    for k in range(1, 6):
        model.preview_targets(fc_hz=fc0 * (1 + 0.05 * k))
    assert model.undo_stack.count() == 0
    model.end_preview("drag")
    assert model.undo_stack.count() == 1
    assert model.targets.fc_hz == fc0 * 1.25
    model.undo_stack.undo()
    assert model.targets.fc_hz == fc0


def test_keyboard_steps_merge(model, some_path):
    model.open(some_path)
    for k in range(4):
        model.set_targets("pm", "pm", pm_deg=50.0 + k)
    assert model.undo_stack.count() == 1
    model.undo_stack.undo()
    assert model.targets.pm_deg == load_design(some_path).compensator.pm_deg


def test_save_reopen_identical(model, sample_path, tmp_path):
    model.open(sample_path)
    model.edit({"stage.dcr": "33m"}, "dcr")
    model.set_targets("fc", fc_hz=model.targets.fc_hz * 0.9)
    out = tmp_path / "saved.toml"
    model.save(out)
    assert not model.dirty
    assert load_design(out) == model.design
    other = DesignModel()
    other.open(out)
    assert other.design == model.design
    same_result(other.result, model.result)


def test_kept_parts_are_analysed_as_given(model, some_path, tmp_path):
    model.open(some_path)
    if model.result.digital is not None:  # a digital controller has no parts to keep
        assert not model.fix_parts() and not model.parts_given
        return
    parts = dict(model.result.parts)
    assert model.fix_parts()
    assert model.parts_given and model.design.compensator.parts == parts
    same_margins(model.result.margins, design_loop(model.design).margins)
    model.save(tmp_path / "p.toml")
    assert load_design(tmp_path / "p.toml").compensator.parts == parts
    assert model.set_targets("fc", fc_hz=model.targets.fc_hz * 1.1)  # moving a target synthesises again
    assert not model.parts_given


def test_capacitor_banks(model, some_path):
    model.open(some_path)
    n = len(model.design.stage.output_caps)
    assert model.add_capacitor_bank()
    assert len(model.design.stage.output_caps) == n + 1
    same_result(model.result, design_loop(model.design))
    assert model.remove_capacitor_bank(n)
    assert len(model.design.stage.output_caps) == n


def test_vin_range_fill(model, some_path):
    model.open(some_path)
    lo, hi = min(model.design.operating.vin), max(model.design.operating.vin)
    assert model.edit({"operating.vin": None, "operating.vin_min": lo, "operating.vin_max": hi,
                       "operating.vin_points": 7, "operating.vin_nominal": None}, "fill")
    np.testing.assert_allclose(model.design.operating.vin, np.linspace(lo, hi, 7), rtol=1e-12)


def test_many_corners_are_computed_off_the_ui_thread(model, qtbot):
    """A 120-corner design is computed in a worker; the result equals the library's, undo goes back."""
    model.open(SOME[0])
    before = model.design
    busy = Spy(model.busy_changed)
    assert model.edit({"operating.vin": None, "operating.vin_min": "18", "operating.vin_max": "32",
                       "operating.vin_points": 40, "operating.vin_nominal": None}, "dense")
    assert model.pending and model.design is before  # returns at once; the old design stays meanwhile
    qtbot.waitUntil(lambda: not model.pending, timeout=60000)
    assert model.design.operating.n_corners == 120
    assert [c[0] for c in busy.calls] == [True, False]
    same_result(model.result, design_loop(model.design))
    model.undo_stack.undo()
    assert model.design == before


def test_many_corners_cancel_keeps_design(model, qtbot):
    model.open(SOME[0])
    before, result = model.design, model.result
    model.edit({"operating.vin": None, "operating.vin_min": "18", "operating.vin_max": "32",
                "operating.vin_points": 60, "operating.vin_nominal": None}, "dense")
    assert model.pending
    model.cancel_pending()
    assert not model.pending
    qtbot.wait(300)
    from PySide6.QtCore import QThreadPool

    QThreadPool.globalInstance().waitForDone(60000)
    qtbot.wait(50)
    assert model.design is before and model.result is result and model.undo_stack.count() == 0


def test_slow_previews_collapse_into_the_latest(model, qtbot):
    """When one computation takes longer than a frame, queued moves collapse: the latest one wins."""
    model.open(SOME[0])
    fc0 = model.targets.fc_hz
    runs = Spy(model.results_changed)
    model._last_compute_s = 1.0  # as if the last run had taken a second
    for k in (1.1, 1.2, 1.3):
        model.preview_targets(fc_hz=fc0 * k)
    assert runs.calls == []  # nothing computed yet: the moves wait for the event loop
    qtbot.waitUntil(lambda: len(runs.calls) == 1, timeout=5000)
    assert model.targets.fc_hz == fc0 * 1.3
    model._last_compute_s = 1.0
    model.preview_targets(fc_hz=fc0 * 1.4)
    model.end_preview("drag")  # the release applies the last move first
    assert model.targets.fc_hz == fc0 * 1.4 and model.undo_stack.count() == 1
