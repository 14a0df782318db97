"""Test set-up: Qt offscreen before anything imports Qt; shared fixtures."""

import os
import shutil
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest
from hypothesis import HealthCheck, settings

# No per-example deadline (a loaded machine is slow, not wrong); in CI the examples are
# derandomised so a run is repeatable, locally they stay random to keep finding new cases.
settings.register_profile("local", deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("ci", parent=settings.get_profile("local"), derandomize=True)
settings.load_profile("ci" if os.environ.get("CI") else "local")

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = sorted((ROOT / "sample_designs").glob("*.toml"))


def pytest_collection_modifyitems(config, items):
    if shutil.which("ngspice"):
        return
    if os.environ.get("CI"):
        return  # in CI a missing ngspice must fail, not skip
    skip = pytest.mark.skip(reason="ngspice not installed (.ci/run installs it)")
    for item in items:
        if "ngspice" in item.keywords:
            item.add_marker(skip)


@pytest.fixture(params=SAMPLES, ids=[p.stem for p in SAMPLES])
def sample_path(request):
    return request.param


@pytest.fixture
def main_window(qtbot, tmp_path, monkeypatch):
    """An empty main window with its own app-data folder (``tmp_path / "appdata"``), shown; closed after the
    test without asking (the undo stack marked clean, autosave stopped).  Qt is imported here, not at the top,
    so the tests that never touch the app do not load it."""
    from app.viewmodel import DesignModel
    from app.window import MainWindow

    data = tmp_path / "appdata"
    monkeypatch.setenv("LOOPKIT_APP_DIR", str(data))
    w = MainWindow(DesignModel(), data_dir=data)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.model.undo_stack.setClean()
    w._autosave_timer.stop()
    w.close()
    w.deleteLater()
