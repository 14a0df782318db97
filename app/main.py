"""Entry point: ``loopkit-gui [FILE]`` (also ``loopkit gui [FILE]`` and ``python -m app``)."""

from __future__ import annotations

import argparse
import os
import sys
import time

__all__ = ["build_window", "main"]

_T0 = time.perf_counter()


def build_window(path: str | None = None):
    """The main window with ``path`` opened (or the starter design); reports a bad file and starts empty."""
    from PySide6.QtWidgets import QMessageBox

    from loopkit import DesignError

    from .viewmodel import DesignModel
    from .window import MainWindow

    model = DesignModel()
    window = MainWindow(model)
    if path:
        try:
            model.open(path)
            window.recent.add(path)
        except (DesignError, OSError) as exc:
            QMessageBox.warning(window, "Cannot open the design", str(exc))
        window._update_title()
    return window


def _report_first_paint(widget) -> None:
    """For the start-time benchmark: print the time to the first painted plot, then quit."""
    from PySide6.QtCore import QEvent, QObject, QTimer
    from PySide6.QtWidgets import QApplication

    class _Watch(QObject):
        def eventFilter(self, obj, event):
            if event.type() == QEvent.Paint and not getattr(self, "done", False):
                self.done = True
                QTimer.singleShot(0, lambda: (print(f"first-plot {time.perf_counter() - _T0:.3f}", flush=True),
                                              QApplication.instance().quit()))
            return False

    watch = _Watch(widget)
    widget.viewport().installEventFilter(watch)


def main(argv: list[str] | None = None) -> int:
    """Start the app; returns the exit status."""
    parser = argparse.ArgumentParser(prog="loopkit-gui", description="Design the loop of a DC-DC converter.")
    parser.add_argument("file", nargs="?", help="design file (TOML) to open")
    args = parser.parse_args(argv)

    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("loopkit")
    app.setOrganizationName("loopkit")
    window = build_window(args.file)
    if os.environ.get("LOOPKIT_GUI_TIME_START"):
        _report_first_paint(window.bode.canvas)
    window.show()
    if not os.environ.get("LOOPKIT_GUI_TIME_START"):
        from PySide6.QtCore import QTimer

        QTimer.singleShot(0, window.offer_recovery)
    return app.exec()


if __name__ == "__main__":
    sys.exit(main())
