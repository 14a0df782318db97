"""The window as a user drives it (pytest-qt, offscreen).

Reference values: loopkit's own path as the command line uses it
(``loopkit design FILE --json`` and :func:`loopkit.loop.design_loop`); the app
must show those numbers, computed by the same code, for the same targets.
"""

from __future__ import annotations

import json
import subprocess
import sys
import xml.etree.ElementTree as ET
from dataclasses import replace

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QFileDialog, QMessageBox

from app.corners_view import fc_text, gm_text, pm_text
from app.testing import drag_marker, move_marker, press_marker, release_marker, settle
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit import export, format_value, load_design
from loopkit.loop import Targets, design_loop
from loopkit.margins import GM_WORDS, gm_state

ROOT = __import__("conftest").ROOT
SAMPLES = __import__("conftest").SAMPLES
BUCK24 = next(p for p in SAMPLES if p.stem == "buck_24v_3v3")


class Unexpected(AssertionError):
    pass


@pytest.fixture(autouse=True)
def no_modal_dialogs(monkeypatch):
    """A dialog nobody answers would hang the test: fail instead (tests that expect one patch it)."""
    def refuse(*args, **kwargs):
        raise Unexpected(f"unexpected dialog: {args[1:3]}")

    for name in ("question", "warning", "information", "critical", "about"):
        monkeypatch.setattr(QMessageBox, name, refuse)


@pytest.fixture
def make_window(qtbot, tmp_path, monkeypatch):
    """Windows on a private data folder; closed without prompts at the end."""
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    made = []

    def make(data_dir=None):
        w = MainWindow(DesignModel(), data_dir=data_dir or tmp_path / "appdata")
        made.append(w)
        return w

    yield make
    for w in made:
        w.model.undo_stack.setClean()
        w._autosave_timer.stop()
        w.close()
        w.deleteLater()


@pytest.fixture
def window(make_window, qtbot):
    w = make_window()
    w.show()
    qtbot.waitExposed(w)
    return w


def open_sample(window, path):
    assert window.open_path(path, ask=False)
    settle(0.02)
    return window.model


def table_margins(window) -> list[tuple[str, str, str]]:
    t = window.corners.table
    return [(t.item(r, 3).text(), t.item(r, 4).text(), t.item(r, 5).text()) for r in range(t.rowCount())]


def expected_rows(result) -> list[tuple[str, str, str]]:
    """The table's texts written out here: fc in engineering notation (Hz), PM (deg) and GM (dB) to 0.1;
    a gain margin that is not a number in the words the CLI and the JSON use (``GM_WORDS`` by ``gm_state``)."""
    m = result.margins
    states = gm_state(m)
    rows = []
    for k in range(result.stage.n_corners):
        fc, pm, gm = float(m.fc_hz[k]), float(m.pm_deg[k]), float(m.gm_db[k])
        rows.append((format_value(fc, digits=3) if np.isfinite(fc) else "none",
                     f"{pm:.1f}" if np.isfinite(pm) else "—",
                     f"{gm:.1f}" if states[k] == "number" else GM_WORDS[str(states[k])]))
    return rows


def assert_shows(window, want) -> None:
    """The corner table, the read-out and the parts table show ``want`` (a LoopResult)."""
    got = window.model.result
    assert got.parts == want.parts
    assert got.feasible == want.feasible
    if not want.feasible:
        assert "No parts" in window.readout.worst.text()
        assert {r[1] for r in table_margins(window)} == {"—"}
        reason = next(f.message for f in want.findings if f.code == "infeasible")
        texts = [window.corners.findings.item(i).text() for i in range(window.corners.findings.count())]
        assert any(reason in t for t in texts)
        assert window.bode._infeasible_text.isVisible()
        return
    for name in ("fc_hz", "pm_deg", "gm_db"):
        np.testing.assert_array_equal(getattr(got.margins, name), getattr(want.margins, name))
    assert table_margins(window) == expected_rows(want)
    w = want.worst_corner
    text = window.readout.worst.text()
    state = str(gm_state(want.margins)[w])
    assert pm_text(float(want.margins.pm_deg[w])) in text and gm_text(float(want.margins.gm_db[w]), state) in text
    assert window.corners.table.item(w, 0).text().startswith("▶")
    window.side_tabs.setCurrentWidget(window.parts)  # the hidden tab catches up when shown
    shown_parts = {window.parts.table.item(r, 0).text(): window.parts.table.item(r, 2).text()
                   for r in range(window.parts.table.rowCount())}
    window.side_tabs.setCurrentWidget(window.corners)
    if want.digital is not None:  # a digital controller: its coefficients instead of parts
        from loopkit.digital_report import coefficient_rows

        assert set(shown_parts) == {name for name, _ in coefficient_rows(want.digital)}
        return
    assert set(shown_parts) == set(want.parts)
    for name, text in shown_parts.items():
        assert text == format_value(want.parts[name], "Ω" if name.startswith("R") else "F", digits=4)


# ---------------------------------------------------------------------- margins as the CLI gives them
@pytest.fixture(scope="module")
def cli_json():
    """``loopkit design FILE --json`` for every sample, run as the user would (a subprocess)."""
    out = {}
    for p in SAMPLES:
        run = subprocess.run([sys.executable, "-m", "loopkit.cli", "design", str(p), "--json"],
                             capture_output=True, text=True, cwd=ROOT, check=True)
        out[p.stem] = json.loads(run.stdout)
    return out


def test_sample_shows_cli_margins(window, sample_path, cli_json):
    model = open_sample(window, sample_path)
    doc = cli_json[sample_path.stem]
    result = model.result
    assert result.parts == doc["parts"]
    assert result.worst_corner == doc["worst_corner"]
    for k, corner in enumerate(doc["corners"]):
        for name in ("fc_hz", "pm_deg", "gm_db"):
            got = float(getattr(result.margins, name)[k])
            want = corner[name]
            assert (want is None and not np.isfinite(got)) or got == want, (k, name, got, want)
    # the GM column says what `loopkit design --json` says: its number, or the word for its gm_state
    shown = [row[2] for row in table_margins(window)]
    assert shown == [f"{c['gm_db']:.1f}" if c["gm_state"] == "number" else GM_WORDS[c["gm_state"]]
                     for c in doc["corners"]]
    assert_shows(window, design_loop(load_design(sample_path)))
    assert window.windowTitle().startswith(sample_path.name)


# ---------------------------------------------------------------------- sliders and the marker
def test_crossover_slider_matches_library(window, sample_path):
    model = open_sample(window, sample_path)
    bar = window.targets_bar
    slider = bar.fc_slider
    pos = slider.value() + 60
    slider.setSliderDown(True)
    for p in range(slider.value() + 10, pos + 1, 10):
        slider.setValue(p)
    slider.setSliderDown(False)  # release: one undo step
    fc = bar.slider_to_fc(pos)
    assert model.targets.fc_hz == fc
    assert model.undo_stack.count() == 1
    design = load_design(sample_path)
    want = design_loop(design, replace(Targets.from_design(design), fc_hz=fc))
    assert_shows(window, want)
    assert bar.fc_edit.text().startswith(fc_text(fc)[:3])


def test_phase_margin_slider_by_keyboard(window, qtbot):
    model = open_sample(window, SAMPLES[0])
    slider = window.targets_bar.pm_slider
    slider.setFocus()
    pm0 = model.targets.pm_deg
    for _ in range(4):
        qtbot.keyClick(slider, Qt.Key_Right)
    assert model.targets.pm_deg == pm0 + 4  # one degree per arrow key
    qtbot.keyClick(slider, Qt.Key_PageDown)
    assert model.targets.pm_deg == pm0 + 4 - 5  # five per page
    assert model.undo_stack.count() == 1  # the key steps merge
    design = load_design(SAMPLES[0])
    assert_shows(window, design_loop(design, replace(Targets.from_design(design), pm_deg=pm0 - 1)))
    model.undo_stack.undo()
    assert model.targets.pm_deg == pm0 and slider.value() == round(pm0)


def test_phase_margin_slider_spacing(window):
    """A hand sets the PM target to the degree: at the default size every degree is >= 4 px of travel."""
    from PySide6.QtWidgets import QStyle, QStyleOptionSlider

    slider = window.targets_bar.pm_slider
    settle(0.05)
    opt = QStyleOptionSlider()
    slider.initStyleOption(opt)
    handle = slider.style().subControlRect(QStyle.CC_Slider, opt, QStyle.SC_SliderHandle, slider)
    travel_px = slider.width() - handle.width()
    degrees = slider.maximum() - slider.minimum()
    assert slider.singleStep() == 1 and slider.pageStep() == 5
    assert travel_px / degrees >= 4.0, (travel_px, degrees)


def test_marker_drag_matches_library(window, sample_path):
    model = open_sample(window, sample_path)
    fc0 = model.targets.fc_hz
    drag_marker(window.bode, fc0 * 1.4)
    fc = model.targets.fc_hz
    assert fc != fc0 and abs(np.log(fc / (fc0 * 1.4))) < 0.05  # where the mouse let go (pixel resolution)
    assert not model.previewing and model.undo_stack.count() == 1
    design = load_design(sample_path)
    assert_shows(window, design_loop(design, replace(Targets.from_design(design), fc_hz=fc)))
    model.undo_stack.undo()
    assert model.targets.fc_hz == fc0
    assert_shows(window, design_loop(design))


def test_marker_preview_updates_every_move(window):
    model = open_sample(window, BUCK24)
    fc0 = model.targets.fc_hz
    seen = []
    model.results_changed.connect(lambda r: seen.append(r.targets.fc_hz))
    press_marker(window.bode)
    for k in (1.25, 1.5, 1.75):  # each beyond pyqtgraph's drag threshold (a few pixels)
        move_marker(window.bode, fc0 * k)
        settle(0.05)  # lets a move queued behind a slow computation (a loaded machine) run
    assert model.previewing and model.undo_stack.count() == 0
    assert len(set(seen)) == 3  # every move recomputed and redrew
    release_marker(window.bode)
    assert model.undo_stack.count() == 1


def test_network_and_boost_split(window):
    model = open_sample(window, next(p for p in SAMPLES if p.stem.startswith("buck")))
    bar = window.targets_bar
    bar.split_slider.setValue(45)
    assert model.targets.boost_split == 0.45
    design = load_design(BUCK24)
    want = design_loop(design, replace(Targets.from_design(design), boost_split=0.45))
    assert want.feasible
    assert_shows(window, want)
    bar.split_slider.setValue(5)  # a lopsided split the K-factor refuses (method auto then searches): nothing crashes
    want = design_loop(design, replace(Targets.from_design(design), boost_split=0.05))
    assert_shows(window, want)
    bar.split_slider.setValue(45)
    i = bar.network.findData("type2")
    bar.network.setCurrentIndex(i)
    bar.network.activated.emit(i)
    assert model.targets.network == "type2"
    assert not bar.split_slider.isEnabled()
    assert_shows(window, design_loop(design, replace(Targets.from_design(design), boost_split=0.45, network="type2")))


def test_series_change_moves_parts(window):
    model = open_sample(window, BUCK24)
    box = window.parts.resistor_series
    i = box.findData("E24")
    box.setCurrentIndex(i)
    box.activated.emit(i)
    design = load_design(BUCK24)
    want = design_loop(design, replace(Targets.from_design(design), resistor_series="E24"))
    assert model.targets.resistor_series == "E24"
    assert_shows(window, want)


# ---------------------------------------------------------------------- invalid input
@pytest.mark.parametrize("key, text, words", [
    ("stage.inductance", "4.7uF", "expected a value in H"),
    ("stage.fsw", "fast", "not a number"),
    ("operating.vout", "0", "nonzero"),
])
def test_invalid_field_shows_message_and_keeps_design(window, qtbot, key, text, words):
    model = open_sample(window, BUCK24)
    before, result = model.design, model.result
    field = window.form.widget_for(key)
    field.setFocus()
    field.selectAll()
    qtbot.keyClicks(field, text)
    qtbot.keyClick(field, Qt.Key_Return)
    assert model.design is before and model.result is result
    assert field.property("invalid") is True
    assert words in field.toolTip() and key in field.toolTip()
    assert words in window.statusBar().currentMessage()
    assert "border" in field.styleSheet()
    assert window.form.error_strip.isVisible() and words in window.form.error_strip.text()
    assert not model.dirty
    # a valid value clears the mark
    field.selectAll()
    qtbot.keyClicks(field, {"stage.inductance": "5.6u", "stage.fsw": "350k", "operating.vout": "3.4"}[key])
    qtbot.keyClick(field, Qt.Key_Return)
    assert field.property("invalid") is False
    assert not window.form.error_strip.isVisible()
    assert model.design is not before
    assert window.statusBar().currentMessage() == ""  # the rejection no longer holds: it leaves the status bar


def test_invalid_topology_change_reverts(window):
    """A boost cannot make 3.3 V from 18-32 V: the choice is refused with analyse_stage's words."""
    model = open_sample(window, BUCK24)
    before = model.design
    box = window.form.widget_for("stage.topology")
    i = box.findData("boost")
    box.setCurrentIndex(i)
    box.activated.emit(i)
    assert model.design is before
    assert "boost" in box.toolTip() and box.property("invalid") is True


def test_empty_means_zero_fields(window, qtbot):
    """Fields whose 0 means 'automatic' or 'ideal' show empty with that word, and an empty entry writes 0."""
    model = open_sample(window, next(p for p in SAMPLES if p.stem.startswith("flyback")))
    field = window.form.widget_for("sensing.r_top")
    assert model.design.sensing.r_top == 0 and field.text() == "" and field.placeholderText()
    field.setText("47k")
    field.editingFinished.emit()
    assert model.design.sensing.r_top == 47e3
    field.setText("")
    field.editingFinished.emit()
    assert model.design.sensing.r_top == 0.0


def test_light_load_automatic(window):
    model = open_sample(window, next(p for p in SAMPLES if p.stem.startswith("flyback")))
    box = window.form.widget_for("stage.light_load")
    assert model.design.stage.light_load == "" and box.currentData() == ""
    assert "DCM" in box.currentText()  # what automatic means for this diode rectifier


def test_fill_range_and_corner_count(window):
    model = open_sample(window, BUCK24)
    form = window.form
    form._vin_points.setValue(7)
    form._on_fill_vin()
    assert len(model.design.operating.vin) in (7, 8)  # the nominal input is kept in a range
    assert window.corners.table.rowCount() == model.design.operating.n_corners
    assert window.bode.loop_mag.n == model.design.operating.n_corners


# ---------------------------------------------------------------------- files
def test_save_reopen_identical(window, make_window, tmp_path, monkeypatch):
    model = open_sample(window, SAMPLES[0])
    model.edit({"stage.dcr": "44m"}, "dcr")
    window.targets_bar.fc_slider.setValue(window.targets_bar.fc_slider.value() - 25)
    out = tmp_path / "mine.toml"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(out), ""))
    window.save_as()
    assert not model.dirty and not window.isWindowModified()
    assert load_design(out) == model.design
    other = make_window()
    other.show()
    assert other.open_path(out, ask=False)
    assert other.model.design == model.design
    assert table_margins(other) == table_margins(window)
    assert str(out.resolve()) in window.recent.paths()


@pytest.mark.parametrize("answer, closes, saved", [
    (QMessageBox.Cancel, False, False),
    (QMessageBox.Discard, True, False),
    (QMessageBox.Save, True, True),
])
def test_unsaved_changes_prompt(window, tmp_path, monkeypatch, answer, closes, saved):
    path = tmp_path / "work.toml"
    path.write_text(SAMPLES[0].read_text())
    model = open_sample(window, path)
    model.edit({"stage.dcr": "41m"}, "dcr")
    asked = []
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: asked.append(a[2]) or answer)
    assert window.close() is closes
    assert len(asked) == 1 and "work.toml" in asked[0]
    assert window.isVisible() is (not closes)
    assert (load_design(path).stage.dcr == 41e-3) is saved


def test_no_prompt_when_clean(window, monkeypatch):
    open_sample(window, SAMPLES[0])
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: pytest.fail("asked without changes"))
    assert window.close()


def test_recovery_restores_work(make_window, tmp_path, monkeypatch):
    data = tmp_path / "appdata"
    path = tmp_path / "work.toml"
    path.write_text(SAMPLES[2].read_text())
    first = make_window()
    first.open_path(path, ask=False)
    first.model.edit({"stage.inductance": "3.3u"}, "L")
    first.model.set_targets("pm", pm_deg=52.0)
    assert first.autosave()
    edited = first.model.design
    first._autosave_timer.stop()  # the app "crashes": no clean exit, the recovery copy stays
    assert len(list((data / "recovery").glob("*.toml"))) == 1

    second = make_window()
    second.show()
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: QMessageBox.Yes)
    assert second.offer_recovery()
    assert second.model.design == edited
    assert second.model.dirty and second.model.path == str(path.resolve())
    assert load_design(path) != edited  # the file itself was not touched
    assert_shows(second, design_loop(edited))
    # saving ends the recovery: the copy goes away
    second.save()
    assert load_design(path) == edited
    first.recovery.discard()  # (the crashed session's own copy was consumed by the restore)
    assert list((data / "recovery").glob("*.toml")) == []


def test_recovery_declined_is_removed(make_window, tmp_path, monkeypatch):
    data = tmp_path / "appdata"
    first = make_window()
    first.model.edit({"stage.dcr": "55m"}, "dcr")
    assert first.autosave()
    first._autosave_timer.stop()
    second = make_window()
    asked = []
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: asked.append(a) or QMessageBox.No)
    assert not second.offer_recovery()
    assert len(asked) == 1
    assert not second.model.dirty
    assert list((data / "recovery").glob("*.toml")) == []
    assert not make_window().offer_recovery()  # asked once only


def test_undo_redo_shortcuts(window, qtbot):
    model = open_sample(window, SAMPLES[0])
    d0 = model.design
    model.edit({"stage.dcr": "47m"}, "dcr")
    d1 = model.design
    window.undo_action.trigger()
    assert model.design == d0
    window.redo_action.trigger()
    assert model.design == d1
    assert window.undo_action.shortcut().toString() == "Ctrl+Z"
    assert "Ctrl+Y" in [s.toString() for s in window.redo_action.shortcuts()]
    names = {a.objectName(): a.shortcut().toString() for a in window.findChildren(type(window.undo_action))}
    assert names["new"] == "Ctrl+N" and names["open"] == "Ctrl+O" and names["save"] == "Ctrl+S"
    assert names["save_as"] == "Ctrl+Shift+S" and names["quit"] == "Ctrl+Q"


# ---------------------------------------------------------------------- parts, exports, highlight
def test_exports_equal_library(window, tmp_path):
    model = open_sample(window, SAMPLES[0])
    want = design_loop(load_design(SAMPLES[0]))
    for kind, func in (("bom", export.bom_csv), ("spice", export.spice_netlist), ("json", export.results_json)):
        out = tmp_path / f"out.{kind}"
        window.export_to(kind, str(out))
        assert out.read_text() == func(want)
    for kind in ("png", "svg"):
        out = tmp_path / f"plot.{kind}"
        window.export_to(kind, str(out))
        assert out.stat().st_size > 5000
    assert out.read_text().lstrip().startswith("<?xml") or ET.parse(out)
    ET.parse(tmp_path / "plot.svg")
    assert model.result.parts


def test_copy_parts_text(window):
    open_sample(window, SAMPLES[0])
    text = window.parts.copy_parts()
    from PySide6.QtGui import QGuiApplication

    assert QGuiApplication.clipboard().text() == text
    for name in window.model.result.parts:
        assert name in text


def test_network_drawing_appears(window, qtbot):
    open_sample(window, SAMPLES[0])
    window.parts.wait_for_drawing()
    qtbot.waitUntil(lambda: window.parts.drawing.renderer().isValid(), timeout=5000)
    assert "snapped" in window.parts.drawing_note.text()


def test_finding_selects_its_corner(window):
    model = open_sample(window, next(p for p in SAMPLES if p.stem.startswith("boost")))
    lst = window.corners.findings
    row = next(i for i in range(lst.count()) if lst.item(i).data(Qt.UserRole) >= 0)
    corner = lst.item(row).data(Qt.UserRole)
    lst.setCurrentRow(row)
    assert model.highlight == (corner,)
    selected = {i.row() for i in window.corners.table.selectedItems()}
    assert selected == {corner}


def test_vin_scrub_highlights_corners(window):
    model = open_sample(window, BUCK24)
    s = window.targets_bar.vin_slider
    s.setValue(2)
    v = sorted(set(model.design.operating.vin))[1]
    vin, _ = model.design.operating.corners()
    assert model.highlight == tuple(np.nonzero(vin == v)[0])
    s.setValue(0)
    assert model.highlight == ()


def test_sweep_runs_off_thread_and_cancels(window, qtbot):
    model = open_sample(window, BUCK24)
    dialog = window.open_sweep()
    qtbot.addWidget(dialog)
    qtbot.waitUntil(lambda: dialog.data is not None, timeout=30000)
    data = dialog.data
    assert dialog.progress.value() == 100
    # at the lowest input voltage the sweep agrees with the corner table (same parts, same loop path)
    st = model.result.stage
    for k in np.nonzero(st.vin == st.vin.min())[0]:
        j = np.nonzero((data["vin"] == st.vin[k]) & (data["load"] == st.load[k]))[0][0]
        np.testing.assert_allclose(data["pm_deg"][j], model.result.margins.pm_deg[k], rtol=1e-6)
    dialog.points.setValue(5000)
    dialog.start()
    dialog.cancel()
    qtbot.waitUntil(lambda: not dialog.is_running(), timeout=30000)
    assert "cancelled" in dialog.status.text() or dialog.progress.value() == 100
    dialog.close()


def test_plant_and_compensator_toggles(window):
    open_sample(window, SAMPLES[0])
    window.plant_action.setChecked(True)
    window.comp_action.setChecked(True)
    r = window.model.result
    assert window.bode.plant_mag.isVisible()
    np.testing.assert_array_equal(window.bode.plant_mag.curve(0), 20 * np.log10(np.abs(r.plant_resp[0])))
    np.testing.assert_array_equal(window.bode.plant_phase.curve(0), r.stage.gvd.phase_deg(r.f_hz)[0])
    # the compensator Gc with the sign `loopkit bode --compensator` prints (Rational.bode of result.compensator)
    np.testing.assert_array_equal(window.bode._comp_phase.yData, r.compensator.bode(r.f_hz)[1][0])
    window.plant_action.setChecked(False)
    assert not window.bode.plant_mag.isVisible()


def test_cautions_banner(window, make_window):
    assert window.caution_banner.isVisible()
    text = window.caution_banner.findChild(type(window.readout.worst)).text()
    for words in ("design aid", "verify", "bench", "stored energy" if False else "store energy", "fault currents",
                  "mains", "local codes", "licensed"):
        assert words in text
    window._on_cautions_acknowledged()
    assert not window.caution_banner.isVisible()
    again = make_window()
    assert not again.caution_banner.isVisibleTo(again)


def test_start_up_and_slider_do_not_import_control(tmp_path):
    """python-control pulls in matplotlib (about 2 s): the app must not import it to start or to move a target."""
    code = (
        "import os, sys\n"
        "os.environ['QT_QPA_PLATFORM'] = 'offscreen'\n"
        "from PySide6.QtWidgets import QApplication\n"
        "app = QApplication([])\n"
        "from app.main import build_window\n"
        f"w = build_window({str(BUCK24)!r}); w.show()\n"
        "from app.testing import settle; settle(0.5)\n"
        "w.targets_bar.fc_slider.setValue(w.targets_bar.fc_slider.value() + 20); settle(0.3)\n"
        "print(sorted(m for m in ('control', 'matplotlib') if m in sys.modules))\n"
        "w.model.undo_stack.setClean()\n"
    )
    env = dict(__import__("os").environ, LOOPKIT_APP_DIR=str(tmp_path))
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, env=env,
                         timeout=120, check=True)
    assert run.stdout.strip().splitlines()[-1] == "[]"


def test_gui_entry_point_opens_file(tmp_path):
    """``loopkit-gui FILE`` (app.main.main) starts, paints the plot of that file and exits when asked."""
    env = dict(__import__("os").environ, LOOPKIT_APP_DIR=str(tmp_path), LOOPKIT_GUI_TIME_START="1",
               QT_QPA_PLATFORM="offscreen")
    run = subprocess.run([sys.executable, "-c", "import sys; from app.main import main; sys.exit(main(sys.argv[1:]))",
                          str(SAMPLES[0])], capture_output=True, text=True, cwd=ROOT, env=env, timeout=120, check=False)
    assert run.returncode == 0, run.stderr[-2000:]
    assert any(line.startswith("first-plot") for line in run.stdout.splitlines())


def test_every_shown_field_edits_or_explains(window, sample_path):
    """Each visible number field, nudged by 10 %, is either applied or marked with loopkit's message; never a crash."""
    from app.fields import ValueEdit

    model = open_sample(window, sample_path)
    form = window.form
    spread = ("operating.vin_min", "operating.vin_max")  # applied by the Fill button (tested above)
    keys = [k for k, w in form._widgets.items()
            if isinstance(w, ValueEdit) and w.isVisibleTo(form) and w.text() and k not in spread]
    assert len(keys) > 10
    for key in keys:
        w = form._widgets[key]
        before = model.design
        w.setText(w.text())  # unchanged text: no edit at all
        w.editingFinished.emit()
        assert model.design is before
        value = w.value_shown * 1.1
        w.setText(repr(value))
        w.editingFinished.emit()
        if model.design is before:
            assert w.property("invalid") is True and "=" in w.toolTip(), key
        else:
            assert not w.property("invalid")
            model.undo_stack.undo()
            assert model.design == before
