"""Entry point: ``loopkit-gui [FILE]`` (also ``loopkit gui [FILE]`` and ``python -m app``)."""

from __future__ import annotations

import argparse
import os
import sys
import time

__all__ = ["build_window", "main"]

_T0 = time.perf_counter()


def build_window(path: str | None = None):
    """The main window with ``path`` opened (or the starter design); reports a bad file and starts empty.

    The design is computed once: the file is read first and the view-model is
    built from it (not from the starter design, then the file).
    """
    from PySide6.QtWidgets import QMessageBox

    from loopkit import DesignError, load_design

    from .viewmodel import DesignModel
    from .window import MainWindow

    model, problem = None, None
    if path:
        try:
            model = DesignModel(load_design(path), path=path)
        except (DesignError, OSError) as exc:
            problem = str(exc) if isinstance(exc, DesignError) else f"{path}: {exc.strerror or exc}"
    window = MainWindow(model or DesignModel())
    if model is not None:
        window.recent.add(path)
    if problem:
        QMessageBox.warning(window, "Cannot open the design", problem)
    window._update_title()
    return window


class _StartWindow:
    """What the user sees while the app loads (Qt widgets only: shown before numpy, loopkit and the plot
    library are imported, about a second on a cold start)."""

    def __init__(self, path: str | None):
        from pathlib import Path

        from PySide6.QtCore import Qt
        from PySide6.QtWidgets import QLabel

        what = f"Opening {Path(path).name}…" if path else "Starting…"
        self.widget = QLabel(f"<h2>loopkit</h2><p>{what}</p>")
        self.widget.setAlignment(Qt.AlignCenter)
        self.widget.setWindowTitle("loopkit")
        self.widget.resize(1400, 900)
        self.widget.setStyleSheet("background: white; color: #444;")

    def show(self) -> None:
        from PySide6.QtWidgets import QApplication

        self.widget.show()
        self.widget.repaint()
        QApplication.instance().processEvents()

    def hand_over(self, window) -> None:
        """Show the main window where the start window is, then close the start window."""
        window.resize(self.widget.size())
        window.move(self.widget.pos())
        window.show()
        self.widget.close()


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
    from loopkit.threads import limit_blas_threads

    limit_blas_threads()

    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("loopkit")
    app.setOrganizationName("loopkit")
    timing = bool(os.environ.get("LOOPKIT_GUI_TIME_START"))
    start = _StartWindow(args.file)
    start.show()  # a window at once; the imports and the design follow
    if timing:
        print(f"first-window {time.perf_counter() - _T0:.3f}", flush=True)
    window = build_window(args.file)
    if timing:
        _report_first_paint(window.bode.canvas)
    start.hand_over(window)
    import gc

    gc.freeze()  # start-up objects leave the collector's generations: fewer, shorter pauses while dragging
    if not os.environ.get("LOOPKIT_GUI_TIME_START"):
        from PySide6.QtCore import QTimer

        QTimer.singleShot(0, window.offer_recovery)
    return app.exec()


if __name__ == "__main__":
    sys.exit(main())
