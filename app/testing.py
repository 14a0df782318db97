"""Drive the window the way a user does, for tests, benchmarks and the screenshot script.

Mouse events go through Qt and pyqtgraph's scene exactly as real ones do
(press, moves spaced beyond pyqtgraph's move-rate limit, release).
"""

from __future__ import annotations

import time

from PySide6.QtCore import QEvent, QPoint, QPointF, Qt
from PySide6.QtGui import QMouseEvent
from PySide6.QtWidgets import QApplication

from .freq import hz_to_view, view_to_hz

__all__ = ["drag_marker", "move_marker", "press_marker", "release_marker", "settle"]


def settle(seconds: float = 0.05) -> None:
    """Process events for a while (layouts, queued signals, timers)."""
    app = QApplication.instance()
    end = time.perf_counter() + seconds
    while time.perf_counter() < end:
        app.processEvents()
        time.sleep(0.002)


def _send(viewport, kind, pos: QPoint, button, buttons) -> None:
    ev = QMouseEvent(kind, QPointF(pos), QPointF(viewport.mapToGlobal(pos)), button, buttons, Qt.NoModifier)
    QApplication.sendEvent(viewport, ev)


def _marker_point(bode, f_hz: float | None = None) -> QPoint:
    vb = bode.mag.getViewBox()
    x = bode.marker.value() if f_hz is None else hz_to_view(f_hz)
    y = sum(vb.viewRange()[1]) / 2
    return bode.canvas.mapFromScene(vb.mapViewToScene(QPointF(x, y)))


def press_marker(bode) -> QPoint:
    """Press the left button on the crossover marker; returns the point pressed."""
    vp = bode.canvas.viewport()
    p = _marker_point(bode)
    _send(vp, QEvent.MouseMove, p, Qt.NoButton, Qt.NoButton)
    _send(vp, QEvent.MouseButtonPress, p, Qt.LeftButton, Qt.LeftButton)
    return p


def move_marker(bode, f_hz: float) -> None:
    """Move the pressed mouse to the x position of ``f_hz`` (after pyqtgraph's rate limit)."""
    time.sleep(0.012)
    p = _marker_point(bode, f_hz)
    p.setY(_marker_point(bode).y())
    _send(bode.canvas.viewport(), QEvent.MouseMove, p, Qt.NoButton, Qt.LeftButton)


def release_marker(bode) -> None:
    _send(bode.canvas.viewport(), QEvent.MouseButtonRelease, _marker_point(bode), Qt.LeftButton, Qt.NoButton)


def drag_marker(bode, f_to_hz: float, steps: int = 6) -> None:
    """Drag the crossover marker from where it is to ``f_to_hz`` in ``steps`` moves, then release."""
    f_from = view_to_hz(bode.marker.value())
    press_marker(bode)
    for k in range(1, steps + 1):
        move_marker(bode, f_from * (f_to_hz / f_from) ** (k / steps))
        QApplication.instance().processEvents()
    release_marker(bode)
    QApplication.instance().processEvents()
