"""The corner table (Vin, load, mode, fc, PM, GM; worst corner marked) and the findings list.

Selecting a row or a finding highlights its corner on the plot.  Rows are
created when the number of corners changes; afterwards only their text moves.
"""

from __future__ import annotations

import math

from PySide6.QtCore import QSignalBlocker, Qt
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHeaderView,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from loopkit import format_value

__all__ = ["COLUMNS", "CornersView", "fc_text", "gm_text", "pm_text"]

COLUMNS = ("Vin (V)", "Load (A)", "Mode", "fc (Hz)", "PM (°)", "GM (dB)")
_WORST_BG = QColor("#fff1c9")
_BAD_FG = QColor("#b02a00")


def cell_texts(vin, load, fc_hz, pm_deg, gm_db) -> tuple[str, str, str, str, str]:
    """The table's numbers: units are in the column headings."""
    gm = "∞" if math.isinf(gm_db) and gm_db > 0 else (f"{gm_db:.1f}" if math.isfinite(gm_db) else "—")
    return (format_value(vin, digits=4), format_value(load, digits=3),
            format_value(fc_hz, digits=3) if math.isfinite(fc_hz) else "none",
            f"{pm_deg:.1f}" if math.isfinite(pm_deg) else "—", gm)


def fc_text(fc_hz: float) -> str:
    return format_value(fc_hz, "Hz", digits=3) if math.isfinite(fc_hz) else "none"


def pm_text(pm_deg: float) -> str:
    return f"{pm_deg:.1f}°" if math.isfinite(pm_deg) else "—"


def gm_text(gm_db: float) -> str:
    if math.isinf(gm_db) and gm_db > 0:
        return "∞"
    return f"{gm_db:.1f} dB" if math.isfinite(gm_db) else "—"


class CornersView(QWidget):
    """Per-corner margins and the findings that point at corners."""

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        split = QSplitter(Qt.Vertical)
        layout.addWidget(split)

        top = QWidget()
        tl = QVBoxLayout(top)
        tl.setContentsMargins(0, 0, 0, 0)
        self.caption = QLabel()
        self.caption.setWordWrap(True)
        tl.addWidget(self.caption)
        self.table = QTableWidget(0, len(COLUMNS))
        self.table.setObjectName("corner_table")
        self.table.setHorizontalHeaderLabels(list(COLUMNS))
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.ExtendedSelection)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Stretch)
        self.table.horizontalHeader().setMinimumSectionSize(36)
        self.table.horizontalHeader().setSectionResizeMode(2, QHeaderView.ResizeToContents)
        self.table.setToolTip("Mode: CCM or DCM; a four-switch stage shows buck, boost or trans(ition band)")
        self.table.verticalHeader().setDefaultSectionSize(20)
        self.table.itemSelectionChanged.connect(self._on_table_selection_changed)
        tl.addWidget(self.table)
        split.addWidget(top)

        bottom = QWidget()
        bl = QVBoxLayout(bottom)
        bl.setContentsMargins(0, 0, 0, 0)
        bl.addWidget(QLabel("Warnings and notes (select one to highlight its corner)"))
        self.findings = QListWidget()
        self.findings.setObjectName("findings")
        self.findings.setWordWrap(True)
        self.findings.itemSelectionChanged.connect(self._on_finding_selection_changed)
        bl.addWidget(self.findings)
        split.addWidget(bottom)
        split.setSizes([380, 260])

        self._bold = QFont()
        self._bold.setBold(True)
        self._plain = QFont()
        self._worst_row = -2
        self._findings_key = None
        self._stale = True
        model.results_changed.connect(self._on_results_changed)
        model.highlight_changed.connect(self._on_highlight_changed)
        self._on_results_changed(model.result)

    # ------------------------------------------------------------------ model -> widgets
    def _ensure_rows(self, n: int) -> bool:
        if self.table.rowCount() == n:
            return False
        with QSignalBlocker(self.table):
            self.table.setRowCount(n)
            for r in range(n):
                for c in range(len(COLUMNS)):
                    if self.table.item(r, c) is None:
                        item = QTableWidgetItem()
                        item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                        self.table.setItem(r, c, item)
                    item = self.table.item(r, c)
                    item.setFont(self._plain)
                    item.setBackground(QBrush())
        return True

    def showEvent(self, event) -> None:
        super().showEvent(event)
        if self._stale:
            self._on_results_changed(self._model.result)

    def _on_results_changed(self, result) -> None:
        if result is None:
            return
        if not self.isVisible():  # hidden tab: bring it up to date when shown
            self._stale = True
            return
        self._stale = False
        stage = result.stage
        n = stage.n_corners
        fresh = self._ensure_rows(n)
        m = result.margins
        worst = result.worst_corner
        modes = stage.mode
        if fresh:
            self._worst_row = -2  # restyle the worst row of the new table
        with QSignalBlocker(self.table):
            for k in range(n):
                mode = str(modes[k])
                if stage.submode[k]:  # four-switch: which mode runs, and DCM if so
                    sub = {"transition": "trans."}.get(stage.submode[k], stage.submode[k])
                    mode = sub if mode == "CCM" else f"{mode} {sub}"
                if m is None:
                    vin, load = cell_texts(stage.vin[k], stage.load[k], math.nan, math.nan, math.nan)[:2]
                    cells = [vin, load, mode, "—", "—", "—"]
                else:
                    vin, load, fc, pm, gm = cell_texts(stage.vin[k], stage.load[k], float(m.fc_hz[k]),
                                                       float(m.pm_deg[k]), float(m.gm_db[k]))
                    cells = [vin, load, mode, fc, pm, gm]
                is_worst = k == worst
                restyle = k in (worst, self._worst_row) and worst != self._worst_row
                for c, text in enumerate(cells):
                    item = self.table.item(k, c)
                    if is_worst and c == 0:
                        text = f"▶ {text}"
                    item.setText(text)
                    if restyle:
                        item.setFont(self._bold if is_worst else self._plain)
                        item.setBackground(QBrush(_WORST_BG) if is_worst else QBrush())
                if m is not None:
                    bad = (not bool(m.stable[k])) or not math.isfinite(float(m.pm_deg[k]))
                    self.table.item(k, 4).setForeground(QBrush(_BAD_FG) if bad else QBrush())
        if m is None:
            self.caption.setText("No parts for these targets: see the warnings below.")
        else:
            self.caption.setText(f"{n} corners; ▶ marks the worst (lowest phase margin). Margins with the "
                                 f"snapped parts.")
        self._worst_row = worst
        self._fill_findings(result.findings)

    def _fill_findings(self, findings) -> None:
        key = tuple((f.code, f.message, f.corner) for f in findings)
        if key == self._findings_key:
            return
        self._findings_key = key
        with QSignalBlocker(self.findings):
            self.findings.clear()
            order = sorted(findings, key=lambda f: (f.severity != "warning", f.corner is not None))
            for f in order:
                item = QListWidgetItem(f"⚠ {f.message}" if f.severity == "warning" else f"Note: {f.message}")
                item.setData(Qt.UserRole, -1 if f.corner is None else int(f.corner))
                item.setToolTip(f"{f.code}: {f.message}")
                item.setForeground(QBrush(QColor("#8a3b00" if f.severity == "warning" else "#555555")))
                self.findings.addItem(item)
            if not findings:
                self.findings.addItem(QListWidgetItem("No warnings."))

    def _on_highlight_changed(self, corners) -> None:
        with QSignalBlocker(self.table):
            self.table.clearSelection()
            for k in corners:
                if 0 <= k < self.table.rowCount():
                    for c in range(len(COLUMNS)):
                        self.table.item(k, c).setSelected(True)
            if corners:
                self.table.scrollToItem(self.table.item(corners[0], 0))

    # ------------------------------------------------------------------ widgets -> model
    def _on_table_selection_changed(self) -> None:
        rows = sorted({i.row() for i in self.table.selectedItems()})
        self._model.set_highlight(rows)

    def _on_finding_selection_changed(self) -> None:
        items = self.findings.selectedItems()
        if not items:
            return
        corner = items[0].data(Qt.UserRole)
        if corner is not None and corner >= 0:
            self._model.set_highlight((corner,))
