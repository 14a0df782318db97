"""``import loopkit`` (every submodule) and the CLI's work never load Qt or pyqtgraph.

The library is pure computation; only ``app`` may import Qt (project rule,
DESIGN.md "Architecture").  Checked in a fresh interpreter so that nothing the
test session imported earlier can hide or fake an import.
"""

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
QT_MODULES = ("PySide6", "shiboken6", "pyqtgraph", "PyQt5", "PyQt6")

PROBE = r"""
import importlib, json, pkgutil, sys
import loopkit
names = ["loopkit"]
for info in pkgutil.walk_packages(loopkit.__path__, "loopkit."):
    importlib.import_module(info.name)
    names.append(info.name)
after_import = sorted(m for m in sys.modules if m.split(".")[0] in QT)
# the work the command line does on a sample design: stage table and Bode CSV
import contextlib, io, tempfile, os
from loopkit.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    codes = [main(["stage", SAMPLE]), main(["bode", SAMPLE, "--plant", "--points", "50"])]
after_work = sorted(m for m in sys.modules if m.split(".")[0] in QT)
print(json.dumps({"names": names, "after_import": after_import, "after_work": after_work, "codes": codes}))
"""


def _probe() -> dict:
    sample = str(ROOT / "sample_designs" / "buck_24v_3v3.toml")
    code = f"QT = {QT_MODULES!r}\nSAMPLE = {sample!r}\n" + PROBE
    out = subprocess.run(
        [sys.executable, "-c", code], check=False, capture_output=True, text=True, cwd=ROOT, timeout=120
    )
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_import_loopkit_and_all_submodules_loads_no_qt():
    res = _probe()
    # the walk really reached the package's modules (a broken walk would pass vacuously)
    for expected in ("loopkit.rational", "loopkit.powerstage", "loopkit.cli", "loopkit.tables", "loopkit.stages.buck"):
        assert expected in res["names"]
    assert res["after_import"] == []


def test_cli_work_loads_no_qt():
    res = _probe()
    assert res["codes"] == [0, 0]
    assert res["after_work"] == []
