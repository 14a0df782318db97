"""The states an engineer meets at the edges, as the window shows them (pytest-qt, offscreen).

References: loopkit's own path as the command line uses it (``loopkit bode``,
``loopkit design --json``, :func:`loopkit.loop.design_loop`) and the library's
words for a gain margin that is not a number (``loopkit.margins.GM_WORDS`` by
``gm_state``).  The targets the colours are held to are the user's PM target
and the user's GM target (``compensator.gm_db``, default 6 dB, common practice,
no source).
"""

from __future__ import annotations

import csv
import io
import re
import subprocess
import sys
from dataclasses import replace

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtWidgets import QComboBox, QLabel, QMessageBox

from app.corners_view import GM_BEYOND_TIP, below_target
from app.testing import settle
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit import load_design
from loopkit.loop import Targets, design_loop
from loopkit.margins import GM_WORDS, gm_state

ROOT = __import__("conftest").ROOT
SAMPLES = {p.stem: p for p in __import__("conftest").SAMPLES}
_OK, _LOW, _BAD, _GREY = "#0a7d32", "#b36b00", "#b02a00", "#555"


@pytest.fixture(autouse=True)
def no_modal_dialogs(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError(f"unexpected dialog: {args[1:3]}")

    for name in ("question", "warning", "information", "critical", "about"):
        monkeypatch.setattr(QMessageBox, name, refuse)


@pytest.fixture
def window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path))
    w = MainWindow(DesignModel(), data_dir=tmp_path)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()
    w.close()
    w.deleteLater()


def open_sample(window, stem):
    assert window.open_path(SAMPLES[stem], ask=False)
    settle(0.02)
    return window.model


def coloured(html: str, label: str) -> str:
    """The colour of the bold value after ``label`` in the read-out's HTML."""
    m = re.search(label + r" <b style='color:(#[0-9a-f]+)'>", html)
    assert m, html
    return m.group(1)


# ---------------------------------------------------------------------- header against the targets
@pytest.mark.parametrize("stem", ["buck_24v_3v3", "fourswitch_automotive_9v", "inverting_minus15v"])
def test_header_colours_against_the_targets(window, stem):
    """PM is amber exactly when the worst corner's PM (as shown) is below the user's PM target, GM when the
    number is below the GM target; moving the PM target moves the colour, not a fixed 45 deg."""
    model = open_sample(window, stem)
    seen = set()
    for pm_target in (40.0, model.targets.pm_deg, 80.0):
        model.set_targets("pm", pm_deg=pm_target)
        r = model.result
        if not r.feasible:
            continue
        w = r.worst_corner
        pm, gm = float(r.margins.pm_deg[w]), float(r.margins.gm_db[w])
        html = window.readout.worst.text()
        want_pm = _BAD if (pm <= 0 or not r.margins.stable.all()) else _LOW if round(pm, 1) < pm_target else _OK
        assert coloured(html, "PM") == want_pm, (pm, pm_target)
        seen.add(want_pm)
        state = str(gm_state(r.margins)[w])
        want_gm = {"beyond-model": _GREY, "none": _OK}.get(state) or (
            _BAD if gm <= 0 else _LOW if round(gm, 1) < model.targets.gm_db else _OK)
        assert coloured(html, "GM") == want_gm
        assert f"PM ≥ {pm_target:g}°" in window.readout.targets.text()
    assert len(seen) >= 1


def test_header_pm_colour_follows_the_target_not_45(window):
    """With the 24 V buck's parts kept, its worst-corner PM is amber against a target 5 deg above it and green
    against one 5 deg below (a fixed 45 deg limit would make it green in both)."""
    model = open_sample(window, "buck_24v_3v3")
    pm = float(model.result.margins.pm_deg[model.result.worst_corner])
    assert pm > 50
    assert model.fix_parts() and model.parts_given
    assert model.edit({"compensator.pm": round(pm + 5)}, "PM target above")
    assert float(model.result.margins.pm_deg[model.result.worst_corner]) == pm  # same parts, same loop
    assert coloured(window.readout.worst.text(), "PM") == _LOW
    assert "below the PM target" in window.readout.targets.text()
    assert model.edit({"compensator.pm": round(pm - 5)}, "PM target below")
    assert model.targets.pm_deg == round(pm - 5)
    assert float(model.result.margins.pm_deg[model.result.worst_corner]) == pm
    assert not below_target(pm, round(pm - 5))
    assert coloured(window.readout.worst.text(), "PM") == _OK
    assert "below the PM target" not in window.readout.targets.text()


# ---------------------------------------------------------------------- gain margin beyond fsw/2
def test_gm_beyond_fsw_half_in_loopkits_words(window):
    """buck_24v_3v3: every corner's -180 deg crossing lies above fsw/2: the app says '>fsw/2' (the CLI's word),
    with the tooltip, in the table, the read-out, the parts panel and the plot, and draws no GM marker."""
    model = open_sample(window, "buck_24v_3v3")
    m = model.result.margins
    states = gm_state(m)
    assert (states == "beyond-model").all()
    word = GM_WORDS["beyond-model"]
    table = window.corners.table
    for k in range(table.rowCount()):
        assert table.item(k, 5).text() == word
        assert table.item(k, 5).toolTip() == GM_BEYOND_TIP
    assert f"GM <b style='color:{_GREY}'>{word}</b>" in window.readout.worst.text()
    assert GM_BEYOND_TIP in window.readout.worst.toolTip()
    window.side_tabs.setCurrentWidget(window.parts)
    assert f"GM {word}" in window.parts.margin_shift.text() and GM_BEYOND_TIP in window.parts.margin_shift.toolTip()
    bode = window.bode
    assert not bode._gm_bar.isVisible() and not bode._f180_dot.isVisible() and not bode._gm_text.isVisible()
    assert bode._gm_word.isVisible() and bode._gm_word.toPlainText() == f"GM {word}"
    assert bode._gm_word.toolTip() == GM_BEYOND_TIP
    for text in [table.item(k, 5).text() for k in range(table.rowCount())] + [window.readout.worst.text()]:
        assert "∞" not in text and "—" not in text


def test_gm_number_is_marked_where_loopkit_reads_it(window):
    """A gain margin loopkit reports as a number is drawn at its phase crossover, below fsw/2."""
    model = open_sample(window, "fourswitch_automotive_9v")
    r = model.result
    w = r.worst_corner
    assert gm_state(r.margins)[w] == "number"
    bode = window.bode
    assert bode._gm_bar.isVisible() and not bode._gm_word.isVisible()
    x = bode._gm_bar.xData[0]
    np.testing.assert_allclose(10 ** x, r.margins.f180_hz[w], rtol=1e-12)
    assert r.margins.f180_hz[w] <= r.design.stage.fsw / 2
    np.testing.assert_allclose(bode._gm_bar.yData, [-r.margins.gm_db[w], 0.0])


# ---------------------------------------------------------------------- compensator sign as the CLI prints it
def test_compensator_phase_as_loopkit_bode_prints_it(window):
    """The compensator's phase in the plot equals the column `loopkit bode --compensator` writes."""
    stem = "buck_24v_3v3"
    model = open_sample(window, stem)
    window.comp_action.setChecked(True)
    f = model.result.f_hz
    run = subprocess.run([sys.executable, "-m", "loopkit.cli", "bode", str(SAMPLES[stem]), "--compensator",
                          "--fmin", repr(float(f[0])), "--fmax", repr(float(f[-1])), "--points", str(f.size)],
                         capture_output=True, text=True, cwd=ROOT, check=True)
    rows = list(csv.reader(io.StringIO(run.stdout)))
    assert rows[0] == ["f_hz", "compensator mag_db", "compensator phase_deg"]
    table = np.array(rows[1:], dtype=float)
    np.testing.assert_allclose(table[:, 0], f, rtol=1e-9)
    np.testing.assert_allclose(window.bode._comp_phase.yData, table[:, 2], rtol=1e-5, atol=1e-4)
    np.testing.assert_allclose(window.bode._comp_mag.yData, table[:, 1], rtol=1e-5, atol=1e-4)


# ---------------------------------------------------------------------- infeasible targets
def test_infeasible_keeps_plant_and_last_feasible_loop(window):
    model = open_sample(window, "boost_liion_5v")
    bode = window.bode
    last_mag = bode.loop_mag._y.copy()
    fc = model.targets.fc_hz * 3
    model.set_targets("infeasible", pm_deg=85.0, fc_hz=fc, method="k-factor")  # the K-factor alone cannot do it
    r = model.result
    design = load_design(SAMPLES["boost_liion_5v"])
    want = design_loop(design, replace(Targets.from_design(design), pm_deg=85.0, fc_hz=fc, method="k-factor"))
    assert not r.feasible and not want.feasible
    reason = next(f.message for f in want.findings if f.code == "infeasible")
    # the plant, in full colour, and the last feasible loop, grey and dashed, with legend entries
    assert bode.plant_mag.isVisible() and bode.plant_phase.isVisible()
    np.testing.assert_array_equal(bode.plant_mag.curve(0), 20 * np.log10(np.abs(r.plant_resp[0])))
    assert bode.ghost_mag.isVisible() and bode.ghost_phase.isVisible()
    np.testing.assert_array_equal(bode.ghost_mag._y, last_mag)
    assert not bode.loop_mag.isVisible()
    labels = [item[1].text for item in bode.legend.items]
    assert "last feasible loop" in labels and any(t.startswith("plant Gvd") for t in labels)
    # the library's reason, naming what to change, above the plot and in the header
    shown = bode._infeasible_text.text()
    assert bode._infeasible_text.isVisible()
    core = reason.split(":", 1)[1].strip() if reason.lower().startswith("no parts:") else reason
    assert core.split(";")[0] in shown.replace("&gt;", ">").replace("&lt;", "<")
    assert "lower the crossover" in shown  # what to change, in the library's words
    assert "No parts" in window.readout.worst.text() and window.readout.worst.toolTip() == core
    # back to feasible targets: the loop returns, the ghost goes
    model.undo_stack.undo()
    assert model.result.feasible
    assert bode.loop_mag.isVisible() and not bode.ghost_mag.isVisible() and not bode._infeasible_text.isVisible()
    assert not bode.plant_mag.isVisible()
    labels = [item[1].text for item in bode.legend.items]
    assert "last feasible loop" not in labels


def test_infeasible_on_open_shows_the_plant(window, tmp_path):
    """A file whose targets cannot be met opens with its plant shown (no last feasible loop of another design)."""
    text = SAMPLES["boost_liion_5v"].read_text(encoding="utf-8")
    text = re.sub(r"(?m)^pm\s*=.*$", 'pm = 88\nmethod = "k-factor"', text, count=1)
    p = tmp_path / "hard.toml"
    p.write_text(text, encoding="utf-8")
    assert window.open_path(p, ask=False)
    assert not window.model.result.feasible
    assert window.bode.plant_mag.isVisible() and not window.bode.ghost_mag.isVisible()
    assert window.bode._infeasible_text.isVisible()


# ---------------------------------------------------------------------- nothing cut off at the default size
def _clipped(window) -> list[str]:
    out = []
    for box in window.findChildren(QComboBox):
        if not box.isVisible():
            continue
        fm = box.fontMetrics()
        need = max(fm.horizontalAdvance(box.itemText(i)) for i in range(box.count())) + 24  # frame and arrow
        if box.width() < need:
            out.append(f"combo {box.objectName() or box.currentText()!r}: {box.width()} < {need} px")
    for label in window.findChildren(QLabel):
        if not label.isVisible() or label.wordWrap() or not label.text() or "<" in label.text():
            continue
        need = label.fontMetrics().horizontalAdvance(label.text())
        if label.contentsRect().width() < need:
            out.append(f"label {label.text()!r}: {label.contentsRect().width()} < {need} px")
    return out


@pytest.mark.parametrize("stem", ["flyback_48v_12v", "fourswitch_automotive_9v"])
def test_nothing_cut_off_at_the_default_size(window, stem):
    open_sample(window, stem)
    assert (window.width(), window.height()) == (1400, 900)
    for tab in (window.corners, window.parts):
        window.side_tabs.setCurrentWidget(tab)
        settle(0.05)
        assert _clipped(window) == []


def test_network_drawing_readable_at_the_default_size(window):
    """The drawing's labels (11 units at its own size) are drawn at >= 7.7 px (before this they were about 5 px,
    too small to read): below that it scrolls sideways rather than shrinks."""
    from app.parts_view import MIN_DRAWING_SCALE

    open_sample(window, "flyback_48v_12v")
    window.side_tabs.setCurrentWidget(window.parts)
    assert window.parts.wait_for_drawing()
    settle(0.1)
    area = window.parts.drawing_area
    assert window.parts.enlarge_button.isEnabled()
    natural = area.svg.renderer().defaultSize()
    assert natural.width() > 0
    assert area.scale() >= MIN_DRAWING_SCALE - 1e-3
    assert 11 * area.scale() >= 7.69
    assert area.svg.height() >= MIN_DRAWING_SCALE * natural.height() - 1


# ---------------------------------------------------------------------- start-up
def test_start_computes_the_design_once(qapp, tmp_path, monkeypatch):
    """``loopkit-gui FILE`` builds one session and runs it once (not the starter design first, then the file)."""
    import app.viewmodel as vm
    from app.main import build_window

    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path))
    sessions, runs = [], []

    class Counting(vm.LoopSession):
        def __init__(self, design):
            sessions.append(design.title)
            super().__init__(design)

        def run(self, targets=None, preview=False):
            runs.append(targets)
            return super().run(targets, preview)

    monkeypatch.setattr(vm, "LoopSession", Counting)
    window = build_window(str(SAMPLES["buck_24v_3v3"]))
    try:
        assert sessions == [load_design(SAMPLES["buck_24v_3v3"]).title]
        assert len(runs) == 1
        assert window.model.path == str(SAMPLES["buck_24v_3v3"].resolve())
        assert window.windowTitle().startswith("buck_24v_3v3.toml")
    finally:
        window.model.undo_stack.setClean()
        window._autosave_timer.stop()
        window.close()


def test_start_window_comes_before_the_heavy_imports(tmp_path):
    """The first window is painted before pyqtgraph and loopkit are imported (they take about a second)."""
    code = (
        "import os, sys\n"
        "os.environ['QT_QPA_PLATFORM'] = 'offscreen'\n"
        "from PySide6.QtWidgets import QApplication\n"
        "app = QApplication([])\n"
        "from app.main import _StartWindow\n"
        "s = _StartWindow(sys.argv[1]); s.show()\n"
        "print(s.widget.isVisible(), sorted(m for m in ('pyqtgraph', 'loopkit', 'numpy') if m in sys.modules))\n"
    )
    env = dict(__import__("os").environ, LOOPKIT_APP_DIR=str(tmp_path))
    run = subprocess.run([sys.executable, "-c", code, str(SAMPLES["buck_24v_3v3"])], capture_output=True, text=True,
                         cwd=ROOT, env=env, timeout=120, check=True)
    assert run.stdout.strip().splitlines()[-1] == "True []"
