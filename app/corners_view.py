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
from loopkit.margins import GM_WORDS, gm_state

__all__ = ["COLUMNS", "GM_BEYOND_TIP", "CornersView", "below_target", "fc_text", "gm_cell", "gm_text", "pm_text"]

COLUMNS = ("Vin (V)", "Load (A)", "Mode", "fc (Hz)", "PM (°)", "GM (dB)", "Qp")
#: How each severity of finding is shown: a missed target first and in red, warnings amber, notes grey.
_SEVERITY_PREFIX = {"error": "✖ Not met: ", "warning": "⚠ "}
_SEVERITY_COLOUR = {"error": "#b02a00", "warning": "#8a3b00"}
#: The Qp column (peak current mode's sampling double pole) shows only under current mode.
_QP_COLUMN = COLUMNS.index("Qp")
_WORST_BG = QColor("#fff1c9")
_BAD_FG = QColor("#b02a00")
_LOW_FG = QColor("#b36b00")


def below_target(value: float, target: float) -> bool:
    """True when ``value`` as shown (0.1 of its unit) is below ``target``: what the header and table colour."""
    return math.isfinite(value) and round(value, 1) < target


#: Tooltip beside every gain margin shown as ``GM_WORDS["beyond-model"]``.
GM_BEYOND_TIP = "beyond fsw/2: not predicted by the averaged model"


def gm_cell(gm_db: float, state: str) -> str:
    """A gain margin for the table (dB in the heading): the number, or loopkit's word for its state.

    ``state`` is :func:`loopkit.margins.gm_state` of the corner: ``"number"``,
    ``"none"`` or ``"beyond-model"``; the words are :data:`loopkit.margins.GM_WORDS`,
    the same the CLI and the JSON use.
    """
    if state != "number" or not math.isfinite(gm_db):
        return GM_WORDS.get(state, GM_WORDS["none"])
    return f"{gm_db:.1f}"


def cell_texts(vin, load, fc_hz, pm_deg, gm_db, state="number") -> tuple[str, str, str, str, str]:
    """The table's numbers: units are in the column headings."""
    return (format_value(vin, digits=4), format_value(load, digits=3),
            format_value(fc_hz, digits=3) if math.isfinite(fc_hz) else "none",
            f"{pm_deg:.1f}" if math.isfinite(pm_deg) else "—", gm_cell(gm_db, state))


def fc_text(fc_hz: float) -> str:
    return format_value(fc_hz, "Hz", digits=3) if math.isfinite(fc_hz) else "none"


def pm_text(pm_deg: float) -> str:
    return f"{pm_deg:.1f}°" if math.isfinite(pm_deg) else "—"


def gm_text(gm_db: float, state: str = "number") -> str:
    """A gain margin with its unit, or loopkit's word for its state (see :func:`gm_cell`)."""
    cell = gm_cell(gm_db, state)
    return f"{cell} dB" if state == "number" and math.isfinite(gm_db) else cell


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
        states = gm_state(m) if m is not None else None
        worst = result.worst_corner
        modes = stage.mode
        figures = result.open_loop.figures if result.open_loop is not None else {}
        qp = figures.get("qp")
        self.table.setColumnHidden(_QP_COLUMN, qp is None)
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
                    cells = [vin, load, mode, "—", "—", "—", ""]
                    for c in (4, 5):
                        self.table.item(k, c).setForeground(QBrush())
                else:
                    vin, load, fc, pm, gm = cell_texts(stage.vin[k], stage.load[k], float(m.fc_hz[k]),
                                                       float(m.pm_deg[k]), float(m.gm_db[k]), str(states[k]))
                    cells = [vin, load, mode, fc, pm, gm, ""]
                if qp is not None:
                    cells[_QP_COLUMN] = "—" if stage.dcm[k] or not math.isfinite(qp[k]) else f"{qp[k]:.2f}"
                is_worst = k == worst
                restyle = k in (worst, self._worst_row) and worst != self._worst_row
                for c, text in enumerate(cells):
                    item = self.table.item(k, c)
                    if is_worst and c == 0:
                        text = f"▶ {text}"
                    if item.text() != text:  # an unchanged cell is not repainted
                        item.setText(text)
                    if restyle:
                        item.setFont(self._bold if is_worst else self._plain)
                        item.setBackground(QBrush(_WORST_BG) if is_worst else QBrush())
                gm_item = self.table.item(k, 5)
                beyond = m is not None and states[k] == "beyond-model"
                gm_item.setToolTip(GM_BEYOND_TIP if beyond else "")
                if m is not None:
                    pm_k, gm_k = float(m.pm_deg[k]), float(m.gm_db[k])
                    bad = (not bool(m.stable[k])) or not math.isfinite(pm_k)
                    low = below_target(pm_k, self._model.targets.pm_deg)
                    self.table.item(k, 4).setForeground(
                        QBrush(_BAD_FG) if bad else QBrush(_LOW_FG) if low else QBrush())
                    gm_low = states[k] == "number" and below_target(gm_k, self._model.targets.gm_db)
                    gm_item.setForeground(QBrush(_BAD_FG) if gm_low and gm_k <= 0 else
                                          QBrush(_LOW_FG) if gm_low else QBrush())
        if m is None:
            self.caption.setText("No parts for these targets: see the warnings below.")
        else:
            note = (f" GM {GM_WORDS['beyond-model']}: the phase reaches −180° only above fsw/2, where the averaged "
                    f"model does not predict it." if (states == "beyond-model").any() else "")
            self.caption.setText(f"{n} corners; ▶ marks the worst (lowest phase margin). Margins with the "
                                 f"snapped parts; amber: below the PM target ({self._model.targets.pm_deg:g}°) or GM "
                                 f"below its target ({self._model.targets.gm_db:g} dB).{note}"
                                 + (" Qp: Q of current mode's sampling double pole at fsw/2 (about 1 is usual)."
                                    if qp is not None else ""))
        self._worst_row = worst
        self._fill_findings(result.findings)

    def _fill_findings(self, findings) -> None:
        key = tuple((f.code, f.message, f.corner) for f in findings)
        if key == self._findings_key:
            return
        self._findings_key = key
        with QSignalBlocker(self.findings):
            self.findings.clear()
            rank = {"error": 0, "warning": 1}
            order = sorted(findings, key=lambda f: (rank.get(f.severity, 2), f.corner is not None))
            for f in order:
                prefix = _SEVERITY_PREFIX.get(f.severity, "Note: ")
                item = QListWidgetItem(f"{prefix}{f.message}")
                item.setData(Qt.UserRole, -1 if f.corner is None else int(f.corner))
                item.setToolTip(f"{f.code}: {f.message}")
                item.setForeground(QBrush(QColor(_SEVERITY_COLOUR.get(f.severity, "#555555"))))
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
