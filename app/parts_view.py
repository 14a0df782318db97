"""The parts panel: computed and snapped values, the network drawing, copy and export.

The drawing (:func:`loopkit.schematic.network_svg`, about 0.1 s) is made off
the UI thread and only once the targets have stopped moving, so it never
holds up a drag.
"""

from __future__ import annotations

import math

from PySide6.QtCore import QByteArray, QObject, QRunnable, QSignalBlocker, Qt, QThreadPool, QTimer, Signal
from PySide6.QtGui import QGuiApplication
from PySide6.QtSvgWidgets import QSvgWidget
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QDialog,
    QGridLayout,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QScrollArea,
    QSizePolicy,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from loopkit import format_value
from loopkit.margins import GM_WORDS, gm_state

from .corners_view import GM_BEYOND_TIP, gm_text

__all__ = ["MIN_DRAWING_SCALE", "SERIES_CHOICES", "PartsView", "parts_text"]

SERIES_CHOICES = ("E6", "E12", "E24", "E48", "E96", "E192", "none")
#: The network drawing is never drawn smaller than this share of its own size (labels stay >= 7.7 px).
MIN_DRAWING_SCALE = 0.7
_DRAW_DELAY_MS = 250


def _unit(designator: str) -> str:
    return "Ω" if designator.startswith("R") else "F" if designator.startswith("C") else ""


def parts_text(result) -> str:
    """The parts as plain text (for the clipboard): one line per part, snapped and computed values."""
    if result is None or not result.feasible:
        return "no parts (targets not feasible)"
    t = result.targets
    lines = [(f"{result.design.title or 'design'}: {result.network} network, resistors {t.resistor_series}, "
              f"capacitors {t.capacitor_series}")]
    for name in result.parts:
        u = _unit(name)
        exact = result.parts_exact.get(name, result.parts[name])
        lines.append(f"{name:6s} {format_value(result.parts[name], u, digits=4):>10s}   "
                     f"(computed {format_value(exact, u, digits=4)})")
    zeros = ", ".join(format_value(z, "Hz") for z in result.zeros_hz) or "none"
    poles = ", ".join("0 Hz (integrator)" if p == 0 else format_value(p, "Hz") for p in result.poles_hz) or "none"
    lines.append(f"zeros: {zeros}; poles: {poles}")
    lines.append("A design aid: verify the loop on the bench.")
    return "\n".join(lines)


class _DrawSignals(QObject):
    done = Signal(int, str, str)  # request id, svg text, error text


class _DrawJob(QRunnable):
    """Draw the network in a worker thread (schemdraw is plain Python, no Qt)."""

    def __init__(self, request: int, network: str, parts: dict, ctx, signals: _DrawSignals):
        super().__init__()
        self._args = (request, network, dict(parts), ctx)
        self._signals = signals

    def run(self) -> None:
        request, network, parts, ctx = self._args
        try:
            from loopkit.schematic import network_svg

            svg = network_svg(network, parts, ctx)
            self._signals.done.emit(request, svg, "")
        except Exception as exc:  # noqa: BLE001 - shown in the panel, never a crash
            self._signals.done.emit(request, "", f"drawing failed: {exc}")


class _DrawingArea(QScrollArea):
    """The network drawing at a size whose labels can be read: fitted to the panel's width, but never
    below :data:`MIN_DRAWING_SCALE` of the drawing's own size (then it scrolls sideways)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("network_drawing_area")
        self.setWidgetResizable(False)
        self.setAlignment(Qt.AlignCenter)
        self.setMinimumHeight(170)
        self.setStyleSheet("QScrollArea { background: white; }")
        self.svg = QSvgWidget()
        self.svg.setObjectName("network_drawing")
        self.svg.setStyleSheet("background: white;")
        self.svg.renderer().setAspectRatioMode(Qt.KeepAspectRatio)
        self.setWidget(self.svg)

    def load(self, svg: bytes) -> None:
        self.svg.load(QByteArray(svg))
        self.svg.renderer().setAspectRatioMode(Qt.KeepAspectRatio)
        self._fit()

    def scale(self) -> float:
        """Drawn size over the drawing's own size (its labels are 11 px at 1)."""
        size = self.svg.renderer().defaultSize()
        return self.svg.width() / size.width() if size.width() > 0 else 1.0

    def _fit(self) -> None:
        size = self.svg.renderer().defaultSize()
        if size.width() <= 0 or size.height() <= 0:
            return
        avail = self.viewport().width() - 2
        scale = min(max(avail / size.width(), MIN_DRAWING_SCALE), 1.25)
        self.svg.setFixedSize(round(size.width() * scale), round(size.height() * scale))

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._fit()


class PartsView(QWidget):
    """Series choice, parts table, poles and zeros, network drawing and the hand-off buttons.

    Signals
    -------
    export_requested(str)
        ``"bom"``, ``"spice"``, ``"json"``, ``"png"`` or ``"svg"`` (the window asks for a file name).
    """

    export_requested = Signal(str)

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self._request = 0
        self._drawn_key = None
        self._stale = True
        self._pool = QThreadPool(self)
        self._pool.setMaxThreadCount(1)
        self._draw_signals = _DrawSignals(self)
        self._draw_signals.done.connect(self._on_drawing_done)
        self._draw_timer = QTimer(self)
        self._draw_timer.setSingleShot(True)
        self._draw_timer.setInterval(_DRAW_DELAY_MS)
        self._draw_timer.timeout.connect(self._start_drawing)

        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        series = QGridLayout()
        series.setColumnStretch(1, 1)
        series.setColumnStretch(3, 1)
        self.resistor_series = QComboBox()
        self.resistor_series.setObjectName("resistor_series")
        self.capacitor_series = QComboBox()
        self.capacitor_series.setObjectName("capacitor_series")
        for box in (self.resistor_series, self.capacitor_series):
            for s in SERIES_CHOICES:
                box.addItem("exact" if s == "none" else s, s)
            box.setToolTip("IEC 60063 series the parts snap to ('exact': no snapping)")
        series.addWidget(QLabel("Resistors"), 0, 0)
        series.addWidget(self.resistor_series, 0, 1)
        series.addWidget(QLabel("Capacitors"), 0, 2)
        series.addWidget(self.capacitor_series, 0, 3)
        layout.addLayout(series)
        self.resistor_series.activated.connect(self._on_resistor_series_activated)
        self.capacitor_series.activated.connect(self._on_capacitor_series_activated)

        self.table = QTableWidget(0, 4)
        self.table.setObjectName("parts_table")
        self.table.setHorizontalHeaderLabels(["Part", "Computed", "Snapped", "Change"])
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Stretch)
        self.table.verticalHeader().setDefaultSectionSize(20)
        self.table.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Preferred)
        layout.addWidget(self.table)
        self.roots = QLabel()
        self.roots.setObjectName("roots")
        self.roots.setWordWrap(True)
        layout.addWidget(self.roots)
        self.margin_shift = QLabel()
        self.margin_shift.setObjectName("margin_shift")
        self.margin_shift.setWordWrap(True)
        layout.addWidget(self.margin_shift)

        self.drawing_area = _DrawingArea()
        self.drawing = self.drawing_area.svg
        layout.addWidget(self.drawing_area, 1)
        note_row = QHBoxLayout()
        self.drawing_note = QLabel("")
        self.drawing_note.setStyleSheet("color: #666;")
        note_row.addWidget(self.drawing_note, 1)
        self.enlarge_button = QPushButton("Larger view…")
        self.enlarge_button.setObjectName("enlarge_drawing")
        self.enlarge_button.setEnabled(False)
        self.enlarge_button.clicked.connect(self.show_drawing_large)
        note_row.addWidget(self.enlarge_button)
        layout.addLayout(note_row)
        self._svg = b""

        buttons = QGridLayout()
        self.copy_button = QPushButton("Copy parts")
        self.copy_button.setObjectName("copy_parts")
        self.copy_button.clicked.connect(self.copy_parts)
        buttons.addWidget(self.copy_button, 0, 0)
        for i, (kind, text) in enumerate((("bom", "BOM (CSV)…"), ("spice", "SPICE netlist…"),
                                          ("json", "Results (JSON)…"), ("png", "Plot PNG…"),
                                          ("svg", "Plot SVG…"))):
            b = QPushButton(text)
            b.setObjectName(f"export_{kind}")
            b.clicked.connect(lambda _=False, k=kind: self.export_requested.emit(k))
            buttons.addWidget(b, (i + 1) // 3, (i + 1) % 3)
        layout.addLayout(buttons)

        model.results_changed.connect(self._on_results_changed)
        model.targets_changed.connect(self._on_targets_changed)
        self._on_targets_changed(model.targets)
        self._on_results_changed(model.result)

    # ------------------------------------------------------------------ model -> widgets
    def _on_targets_changed(self, t) -> None:
        for box, value in ((self.resistor_series, t.resistor_series), (self.capacitor_series, t.capacitor_series)):
            with QSignalBlocker(box):
                box.setCurrentIndex(max(box.findData(value), 0))

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self._stale:
            self._on_results_changed(self._model.result)

    def _on_results_changed(self, result) -> None:
        if result is None:
            return
        if not self.isVisible():  # hidden tab: bring it up to date when shown
            self._stale = True
            self._schedule_drawing()
            return
        self._stale = False
        if result.design.control.scheme == "digital":
            self._show_coefficients(result)
            self._schedule_drawing()
            return
        self.table.setHorizontalHeaderLabels(["Part", "Computed", "Snapped", "Change"])
        names = list(result.parts)  # the network's own order (R1, Rb, R2..., C1...)
        if self.table.rowCount() != len(names):
            self.table.setRowCount(len(names))
            rows = max(len(names), 3)
            self.table.setFixedHeight(self.table.horizontalHeader().height() + rows * 20 + 4)
            for r in range(len(names)):
                for c in range(4):
                    if self.table.item(r, c) is None:
                        item = QTableWidgetItem()
                        item.setTextAlignment((Qt.AlignLeft if c == 0 else Qt.AlignRight) | Qt.AlignVCenter)
                        self.table.setItem(r, c, item)
        given = self._model.parts_given
        for r, name in enumerate(names):
            u = _unit(name)
            snapped = result.parts[name]
            exact = result.parts_exact.get(name, snapped)
            change = (snapped / exact - 1.0) * 100.0 if exact else math.nan
            cells = (name, format_value(exact, u, digits=4), format_value(snapped, u, digits=4),
                     "given" if given else f"{change:+.1f} %")
            for c, text in enumerate(cells):
                self.table.item(r, c).setText(text)
        if result.feasible:
            zeros = ", ".join(format_value(z, "Hz") for z in result.zeros_hz) or "none"
            poles = ", ".join("0 (integrator)" if p == 0 else format_value(p, "Hz") for p in result.poles_hz)
            self.roots.setText(f"<b>Zeros</b> {zeros}<br><b>Poles</b> {poles or 'none'}")
            w = result.worst_corner
            m, mx = result.margins, result.margins_exact
            if given:
                self.margin_shift.setText("Parts as given in the design (no snapping).")
            else:
                sx, sm = str(gm_state(mx)[w]), str(gm_state(m)[w])
                self.margin_shift.setText(
                    f"Worst corner with computed parts: PM {mx.pm_deg[w]:.1f}°, GM {gm_text(mx.gm_db[w], sx)}; "
                    f"with snapped parts: PM {m.pm_deg[w]:.1f}°, GM {gm_text(m.gm_db[w], sm)}.")
                beyond = "beyond-model" in (sx, sm)
                self.margin_shift.setToolTip(f"GM {GM_WORDS['beyond-model']}: {GM_BEYOND_TIP}" if beyond else "")
        else:
            self.roots.setText("No parts: the targets cannot be met (see the warnings).")
            self.margin_shift.setText("")
        self._schedule_drawing()

    def _show_coefficients(self, result) -> None:
        """A digital controller: its difference equation's coefficients (exact), z-plane roots, margins."""
        from loopkit.digital_report import coefficient_rows

        rows = coefficient_rows(result.digital) if result.digital is not None else []
        self.table.setHorizontalHeaderLabels(["Coefficient", "Exact", "Fixed point", ""])
        self.table.setRowCount(len(rows))
        self.table.setFixedHeight(self.table.horizontalHeader().height() + max(len(rows), 3) * 20 + 4)
        for r, (name, value) in enumerate(rows):
            for c, text in enumerate((name, f"{value:.10g}", "-", "")):
                item = self.table.item(r, c)
                if item is None:
                    item = QTableWidgetItem()
                    item.setTextAlignment((Qt.AlignLeft if c == 0 else Qt.AlignRight) | Qt.AlignVCenter)
                    self.table.setItem(r, c, item)
                item.setText(text)
        if result.digital is None:
            self.roots.setText("No controller: the targets cannot be met (see the warnings).")
            self.margin_shift.setText("")
            return
        dig = result.digital
        z, p = dig.controller.zeros()[0], dig.controller.poles()[0]

        def roots(r) -> str:
            return ", ".join(f"{x.real:.6g}" if abs(x.imag) < 1e-12 else f"{x:.6g}" for x in r)

        self.roots.setText(f"<b>Digital {dig.form}</b> ({dig.method}), fs {format_value(dig.fs_hz, 'Hz')}: "
                           f"u = PWM steps, e = ADC codes<br><b>Zeros (z)</b> {roots(z) or 'none'}<br>"
                           f"<b>Poles (z)</b> {roots(p)}")
        w = result.worst_corner
        m = result.margins
        self.margin_shift.setText(f"Worst corner: PM {m.pm_deg[w]:.1f}°, GM {gm_text(m.gm_db[w], str(gm_state(m)[w]))};"
                                  f" the delays cost {max(float(x) for x in dig.delay_phase_deg):.1f}° at fc.")

    def _schedule_drawing(self) -> None:
        self._draw_timer.start()  # restarts: draws once the targets stop moving

    def _start_drawing(self) -> None:
        if self._model.previewing:
            self._draw_timer.start()
            return
        result = self._model.result
        if result is None:
            return
        if result.design.control.scheme == "digital":
            self.drawing_area.load(b"")
            self.drawing_note.setText("A digital controller: no network to draw.")
            self.enlarge_button.setEnabled(False)
            return
        from loopkit.loop import network_context

        parts = result.parts if result.feasible else {}
        key = (result.network, tuple(sorted(parts.items())))
        if key == self._drawn_key:
            return
        self._drawn_key = key
        self._request += 1
        self.drawing_note.setText("drawing…")
        ctx = network_context(self._model.design)
        self._pool.start(_DrawJob(self._request, result.network, parts, ctx, self._draw_signals))

    def _on_drawing_done(self, request: int, svg: str, error: str) -> None:
        if request != self._request:
            return
        if error:
            self.drawing_note.setText(error)
            return
        self._svg = svg.encode("utf-8")
        self.drawing_area.load(self._svg)
        self.enlarge_button.setEnabled(True)
        self.drawing_note.setText("Network with the snapped values")

    def show_drawing_large(self) -> QDialog:
        """The network drawing in its own window (resizable)."""
        dialog = QDialog(self)
        dialog.setWindowTitle("Compensator network")
        dialog.resize(1000, 560)
        view = QSvgWidget(dialog)
        view.load(QByteArray(self._svg))
        view.renderer().setAspectRatioMode(Qt.KeepAspectRatio)
        view.setStyleSheet("background: white;")
        box = QVBoxLayout(dialog)
        box.addWidget(view)
        dialog.show()
        return dialog

    def wait_for_drawing(self, timeout_ms: int = 5000) -> bool:
        """Start any pending drawing now and wait for it (used by tests and screenshots)."""
        if self._draw_timer.isActive():
            self._draw_timer.stop()
            self._start_drawing()
        return self._pool.waitForDone(timeout_ms)

    # ------------------------------------------------------------------ widgets -> model
    def _on_resistor_series_activated(self, index: int) -> None:
        s = self.resistor_series.itemData(index)
        self._model.set_targets(f"Resistor series {s}", resistor_series=s)

    def _on_capacitor_series_activated(self, index: int) -> None:
        s = self.capacitor_series.itemData(index)
        self._model.set_targets(f"Capacitor series {s}", capacitor_series=s)

    def copy_parts(self) -> str:
        text = parts_text(self._model.result)
        QGuiApplication.clipboard().setText(text)
        return text

