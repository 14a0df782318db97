"""The app's files: exports written as the command line writes them, opening a design whose loop
cannot be computed, and recovery copies that cannot be read (pytest-qt, offscreen).

The expectations are loopkit's own file rules (loopkit/atomicfile.py, README "Design files"):
a new file gets 0666 less the umask, an existing one keeps its permissions; a failure is
reported in the window and leaves the shown design as it was.
"""

from __future__ import annotations

import json
import os
import stat
import sys

import pytest

pytest.importorskip("pytestqt")
pytestmark = pytest.mark.gui

from PySide6.QtWidgets import QMessageBox

from app import viewmodel
from app.files import Recovery
from app.testing import settle
from app.viewmodel import DesignModel
from app.window import MainWindow
from loopkit.cli import main as cli_main

SAMPLES = __import__("conftest").SAMPLES


class Unexpected(AssertionError):
    pass


@pytest.fixture(autouse=True)
def dialogs(monkeypatch):
    """Dialogs are recorded (warnings) or refused (questions nobody expects), never shown."""
    shown = []

    def refuse(*args, **kwargs):
        raise Unexpected(f"unexpected dialog: {args[1:3]}")

    for name in ("question", "information", "critical", "about"):
        monkeypatch.setattr(QMessageBox, name, refuse)
    monkeypatch.setattr(QMessageBox, "warning", lambda *a, **k: shown.append((a[1], a[2])) or QMessageBox.Ok)
    return shown


@pytest.fixture
def make_window(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(tmp_path / "appdata"))
    made = []

    def make():
        w = MainWindow(DesignModel(), data_dir=tmp_path / "appdata")
        made.append(w)
        return w

    yield make
    for w in made:
        w.model.undo_stack.setClean()
        w._autosave_timer.stop()
        w.close()
        w.deleteLater()


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX permissions")
def test_app_exports_get_the_command_lines_permissions(make_window, tmp_path, capsys):
    window = make_window()
    assert window.open_path(SAMPLES[0], ask=False)
    settle(0.02)
    app_dir, cli_dir = tmp_path / "app", tmp_path / "cli"
    app_dir.mkdir()
    cli_dir.mkdir()
    umask = os.umask(0o022)
    try:
        for kind in ("bom", "spice", "json", "png", "svg"):
            window.export_to(kind, str(app_dir / f"out.{kind}"))
        assert cli_main(["export", str(SAMPLES[0]), "--bom", str(cli_dir / "out.bom")]) == 0
        kept = app_dir / "out.json"
        os.chmod(kept, 0o640)
        window.export_to("json", str(kept))  # an existing file keeps its permissions, as in the CLI
    finally:
        os.umask(umask)
    cli_mode = stat.S_IMODE((cli_dir / "out.bom").stat().st_mode)
    assert cli_mode == 0o644
    for kind in ("bom", "spice", "png", "svg"):
        assert stat.S_IMODE((app_dir / f"out.{kind}").stat().st_mode) == cli_mode, kind
    assert stat.S_IMODE(kept.stat().st_mode) == 0o640
    assert (app_dir / "out.bom").read_text() == (cli_dir / "out.bom").read_text()
    assert sorted(p.name for p in app_dir.iterdir()) == [f"out.{k}" for k in ("bom", "json", "png", "spice", "svg")]


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX permissions")
def test_app_export_refuses_a_read_only_file(make_window, tmp_path):
    window = make_window()
    assert window.open_path(SAMPLES[0], ask=False)
    out = tmp_path / "bom.csv"
    out.write_text("mine\n")
    os.chmod(out, 0o444)
    with pytest.raises(PermissionError) as err:
        window.export_to("bom", str(out))
    assert err.value.filename == str(out)
    assert out.read_text() == "mine\n"


def test_a_design_whose_loop_fails_while_opening_is_reported_in_the_window(make_window, monkeypatch, dialogs):
    window = make_window()
    assert window.open_path(SAMPLES[0], ask=False)
    shown_design, shown_path = window.model.design, window.model.path

    def broken(session, design, preview=False):
        raise ZeroDivisionError("float division by zero")  # what a computation that fails inside looks like

    monkeypatch.setattr(viewmodel.DesignModel, "_run", staticmethod(broken))
    assert window.open_path(SAMPLES[1], ask=False) is False  # no exception escapes
    assert len(dialogs) == 1
    title, message = dialogs[0]
    assert title == "Cannot open the design"
    assert str(SAMPLES[1]) in message and "ZeroDivisionError" in message and "cannot be computed" in message
    assert "cannot be computed" in window.statusBar().currentMessage()
    assert window.model.design is shown_design and window.model.path == shown_path


def _corrupt_copy(folder, name: str, meta) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / f"{name}.toml").write_text(SAMPLES[0].read_text())
    (folder / f"{name}.json").write_text(meta if isinstance(meta, str) else json.dumps(meta))


@pytest.mark.parametrize(
    "meta, words",
    [
        ("[]", "not a table"),
        ({"original": "", "saved_at": "yesterday"}, "time stamp"),
        ({"original": "", "saved_at": 1e300}, "time stamp"),
        ({"original": "", "saved_at": float("nan")}, "time stamp"),
        ({"original": 42, "saved_at": 1.0}, "not text"),
        ("{not json", "cannot be read"),
    ],
)
def test_recovery_entries_that_cannot_be_read_are_set_aside(tmp_path, meta, words):
    recovery = Recovery(tmp_path)
    _corrupt_copy(recovery.folder, "abc", meta)
    assert recovery.leftovers() == []
    [(moved, why)] = recovery.set_aside
    assert words in why
    assert moved == recovery.folder / "set-aside" / "abc.toml" and moved.is_file()
    assert not (recovery.folder / "abc.toml").exists() and not (recovery.folder / "abc.json").exists()
    assert Recovery(tmp_path).leftovers() == [] and Recovery(tmp_path).set_aside == []


def test_a_corrupt_recovery_entry_is_reported_once_not_on_every_start(make_window, tmp_path, dialogs):
    folder = tmp_path / "appdata" / "recovery"
    _corrupt_copy(folder, "aaa", "[]")
    _corrupt_copy(folder, "bbb", {"original": "", "saved_at": "not a time"})
    assert make_window().offer_recovery() is False  # no question asked (the fixture would refuse it)
    assert len(dialogs) == 1
    title, message = dialogs[0]
    assert title == "Recovery copy set aside" and "aaa.toml" in message and "bbb.toml" in message
    assert make_window().offer_recovery() is False  # the next start: nothing to say
    assert len(dialogs) == 1


def test_a_recovery_copy_whose_loop_fails_is_reported_and_removed(make_window, tmp_path, monkeypatch, dialogs):
    folder = tmp_path / "appdata" / "recovery"
    _corrupt_copy(folder, "ccc", {"original": "", "saved_at": 1.7e9})
    monkeypatch.setattr(QMessageBox, "question", lambda *a, **k: QMessageBox.Yes)
    window = make_window()
    monkeypatch.setattr(viewmodel.DesignModel, "_run", staticmethod(lambda s, d: 1 / 0))
    assert window.offer_recovery() is False
    assert [t for t, _ in dialogs] == ["Cannot restore"] and "ZeroDivisionError" in dialogs[0][1]
    assert not (folder / "ccc.toml").exists()


@pytest.mark.parametrize("content", ["42", '{"a": 1}', "null", "[1, null, true]", "not json"])
def test_a_damaged_recent_list_is_an_empty_one(tmp_path, content):
    from app.files import RecentFiles

    (tmp_path / "recent.json").write_text(content)
    recent = RecentFiles(tmp_path)
    assert recent.paths() == []
    recent.add(SAMPLES[0])
    assert recent.paths() == [str(SAMPLES[0].resolve())]
