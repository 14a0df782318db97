"""Write screenshots of the app's main states to docs/screenshots/ (offscreen, 1400 x 900).

    python tools/screenshots.py [OUTDIR]

States: every sample design as it opens; a crossover-marker drag in progress;
an invalid field with its message; the parts panel with the network drawing;
a gain margin beyond fsw/2; targets not met at some corners; targets that cannot be met (infeasible);
the plant and compensator shown with the loop; a highlighted input voltage;
the dense input-voltage sweep.  The app's data folder is a temporary one, so
nothing of the user's (recent files, recovery copies) is touched or shown.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ["LOOPKIT_APP_DIR"] = tempfile.mkdtemp(prefix="loopkit-shots-")

from PySide6.QtWidgets import QApplication

SIZE = (1400, 900)


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0]) if argv else ROOT / "docs" / "screenshots"
    out.mkdir(parents=True, exist_ok=True)
    app = QApplication.instance() or QApplication([])
    from app.testing import move_marker, press_marker, release_marker, settle
    from app.viewmodel import DesignModel
    from app.window import SAMPLES_DIR, MainWindow

    window = MainWindow(DesignModel(), data_dir=Path(os.environ["LOOPKIT_APP_DIR"]))
    window.resize(*SIZE)
    window.show()
    settle(0.3)
    written = []

    def shot(name: str, widget=None) -> None:
        settle(0.15)
        path = out / f"{name}.png"
        (widget or window).grab().save(str(path))
        written.append(path)

    def away(bode) -> None:
        """Move the pointer off the marker so it is not drawn hovered."""
        from PySide6.QtCore import QEvent, QPoint, QPointF, Qt
        from PySide6.QtGui import QMouseEvent

        vp = bode.canvas.viewport()
        pos = QPointF(QPoint(5, 5))
        QApplication.sendEvent(vp, QMouseEvent(QEvent.MouseMove, pos, QPointF(vp.mapToGlobal(QPoint(5, 5))),
                                               Qt.NoButton, Qt.NoButton, Qt.NoModifier))

    def ready() -> None:
        window.parts.wait_for_drawing()
        settle(0.3)

    samples = sorted(SAMPLES_DIR.glob("*.toml"))
    for p in samples:
        window.open_path(p, ask=False)
        window.bode.fit()
        ready()
        shot(f"sample-{p.stem}")
        if p.stem.startswith("buck"):
            window._on_cautions_acknowledged()  # the first-run note shows on the first picture only

    buck = next(p for p in samples if p.stem.startswith("buck"))
    window.open_path(buck, ask=False)
    ready()
    # dragging the crossover marker (held down, half way)
    fc0 = window.model.targets.fc_hz
    press_marker(window.bode)
    for k in (1.1, 1.2, 1.3, 1.4):
        move_marker(window.bode, fc0 * k)
        app.processEvents()
    shot("dragging-crossover")
    release_marker(window.bode)
    away(window.bode)
    window.model.undo_stack.undo()

    # an invalid field: the message at the field and in the status bar
    field = window.form.widget_for("stage.inductance")
    field.setText("4.7uF")
    field.editingFinished.emit()
    window.form.ensureWidgetVisible(field)
    field.setFocus()
    shot("invalid-field")
    window.model.edit({"stage.inductance": window.model.design.stage.inductance}, "restore")
    field.set_value(window.model.design.stage.inductance)

    # parts panel
    window.side_tabs.setCurrentWidget(window.parts)
    ready()
    shot("parts-panel")
    window.side_tabs.setCurrentWidget(window.corners)

    # every corner's -180 deg crossing above fsw/2: the gain margin in loopkit's words, no marker
    shot("gm-beyond-half-fsw")

    # targets that cannot be met: the plant, the last feasible loop and the library's reason
    boost = next(p for p in samples if p.stem.startswith("boost"))
    window.open_path(boost, ask=False)
    ready()
    fc = window.model.targets.fc_hz * 3
    window.model.set_targets("Hard targets", pm_deg=85.0, fc_hz=fc)  # method auto: parts, with every miss named
    shot("targets-not-met")
    window.model.undo_stack.undo()
    window.model.set_targets("Infeasible targets", pm_deg=85.0, fc_hz=fc, method="k-factor")  # the K factor alone: none
    shot("infeasible-target")
    window.model.undo_stack.undo()
    window.open_path(buck, ask=False)
    ready()

    # plant and compensator with the loop, one input voltage highlighted
    window.plant_action.setChecked(True)
    window.comp_action.setChecked(True)
    window.targets_bar.vin_slider.setValue(1)
    shot("plant-compensator-highlight")
    window.plant_action.setChecked(False)
    window.comp_action.setChecked(False)
    window.targets_bar.vin_slider.setValue(0)

    # the dense sweep (runs in a worker thread)
    dialog = window.open_sweep()
    while dialog.data is None and dialog.is_running():
        settle(0.1)
    settle(0.3)
    shot("vin-sweep", dialog)
    dialog.close()

    window.model.undo_stack.setClean()
    window.close()
    for p in written:
        print(p.relative_to(ROOT) if p.is_relative_to(ROOT) else p)
    return 0


if __name__ == "__main__":
    sys.exit(main())
