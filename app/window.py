"""The main window: menus, shortcuts, files, autosave and the panels around the Bode plot."""

from __future__ import annotations

import sys
import traceback
from pathlib import Path

from PySide6.QtCore import Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (
    QApplication,
    QFileDialog,
    QFrame,
    QHBoxLayout,
    QLabel,
    QMainWindow,
    QMessageBox,
    QProgressBar,
    QPushButton,
    QSplitter,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from loopkit import DesignError, format_value, loads_design
from loopkit.atomicfile import atomic_path
from loopkit.atomicfile import write_text_atomic as write_export

from .corners_view import CornersView
from .efficiency_view import open_efficiency
from .files import RecentFiles, Recovery, app_dir, write_text_atomic
from .forms import DesignForm
from .parts_view import PartsView
from .plots import BodeView
from .readout import MarginsReadout
from .targets_view import TargetsBar, nice_hz
from .texts import ABOUT_HTML, CAUTION_SHORT, CAUTIONS_HTML
from .viewmodel import DesignModel

__all__ = ["SAMPLES_DIR", "MainWindow"]

#: Sample designs shipped beside the package in a source checkout (File > Open sample).
SAMPLES_DIR = Path(__file__).resolve().parents[1] / "sample_designs"
_AUTOSAVE_MS = 5000
_FILTER = "loopkit designs (*.toml);;All files (*)"


class MainWindow(QMainWindow):
    """The app's window around one :class:`DesignModel`.

    Parameters
    ----------
    model : DesignModel, optional
        The view-model; a new one (starter design) by default.
    data_dir : Path, optional
        Where recent files, recovery copies and the first-run flag live
        (default :func:`app.files.app_dir`).
    """

    def __init__(self, model: DesignModel | None = None, data_dir: Path | None = None):
        super().__init__()
        self.model = model or DesignModel()
        self._data_dir = Path(data_dir) if data_dir else app_dir()
        self.recent = RecentFiles(self._data_dir)
        self.recovery = Recovery(self._data_dir)
        self._autosaved_text = None
        self._status_error: str | None = None
        self.resize(1400, 900)

        central = QWidget()
        outer = QVBoxLayout(central)
        outer.setContentsMargins(4, 4, 4, 0)
        outer.setSpacing(4)
        self.caution_banner = self._build_banner()
        outer.addWidget(self.caution_banner)
        self.readout = MarginsReadout(self.model)
        outer.addWidget(self.readout)

        self.form = DesignForm(self.model)
        self.form.setMinimumWidth(362)
        self.bode = BodeView(self.model)
        self.targets_bar = TargetsBar(self.model)
        self.corners = CornersView(self.model)
        self.parts = PartsView(self.model)
        centre = QWidget()
        cl = QVBoxLayout(centre)
        cl.setContentsMargins(0, 0, 0, 0)
        cl.setSpacing(2)
        cl.addWidget(self.bode, 1)
        cl.addWidget(self.targets_bar)
        self.side_tabs = QTabWidget()
        self.side_tabs.setObjectName("side_tabs")
        self.side_tabs.setMinimumWidth(340)
        self.side_tabs.addTab(self.corners, "Corners and warnings")
        self.side_tabs.addTab(self.parts, "Parts")
        self.splitter = QSplitter(Qt.Horizontal)
        self.splitter.addWidget(self.form)
        self.splitter.addWidget(centre)
        self.splitter.addWidget(self.side_tabs)
        self.splitter.setStretchFactor(1, 1)
        # the side panel wide enough for the network drawing's labels to be read (about 0.75 of its size)
        self.splitter.setSizes([362, 560, 478])
        outer.addWidget(self.splitter, 1)
        self.setCentralWidget(central)

        self._build_actions()
        self.bode.marker_moved.connect(self._on_marker_moved)
        self.bode.marker_released.connect(self._on_marker_released)
        self.targets_bar.network_chosen.connect(self.form.show_network_rows)
        self.parts.export_requested.connect(self._on_export_requested)
        self.form.message.connect(self._on_form_message)
        self.model.field_invalid.connect(self._on_field_invalid)
        self.model.field_valid.connect(self._on_value_applied)
        self.model.results_changed.connect(self._on_value_applied)
        self.model.compute_failed.connect(self._on_compute_failed)
        self.model.dirty_changed.connect(self._on_dirty_changed)
        self.model.path_changed.connect(self._on_path_changed)
        self.model.busy_changed.connect(self._on_busy_changed)
        self.busy_bar = QProgressBar()
        self.busy_bar.setRange(0, 0)  # the loop path has no progress steps: a busy indicator
        self.busy_bar.setMaximumWidth(160)
        self.busy_cancel = QPushButton("Cancel")
        self.busy_cancel.clicked.connect(self.model.cancel_pending)
        self.busy_label = QLabel()
        for w in (self.busy_label, self.busy_bar, self.busy_cancel):
            self.statusBar().addPermanentWidget(w)
            w.setVisible(False)

        self._autosave_timer = QTimer(self)
        self._autosave_timer.setInterval(_AUTOSAVE_MS)
        self._autosave_timer.timeout.connect(self.autosave)
        self._autosave_timer.start()
        self._update_title()

    # ------------------------------------------------------------------ building
    def _build_banner(self) -> QFrame:
        banner = QFrame()
        banner.setObjectName("caution_banner")
        banner.setStyleSheet("#caution_banner { background: #fff6d6; border: 1px solid #e0c060; border-radius: 3px; }")
        h = QHBoxLayout(banner)
        h.setContentsMargins(8, 3, 8, 3)
        text = QLabel(CAUTION_SHORT.replace("Caution:", "<b>Caution:</b>", 1))
        text.setWordWrap(True)
        h.addWidget(text, 1)
        more = QPushButton("Read more")
        more.clicked.connect(self.show_cautions)
        ok = QPushButton("I understand")
        ok.setObjectName("cautions_ok")
        ok.clicked.connect(self._on_cautions_acknowledged)
        h.addWidget(more)
        h.addWidget(ok)
        banner.setVisible(not (self._data_dir / "cautions-read").exists())
        return banner

    def _action(self, menu, text: str, slot, shortcut=None, name: str = "") -> QAction:
        act = QAction(text, self)
        if shortcut is not None:
            act.setShortcuts(shortcut if isinstance(shortcut, list) else [shortcut])
        act.triggered.connect(slot)
        act.setObjectName(name or text)
        menu.addAction(act)
        return act

    def _build_actions(self) -> None:
        bar = self.menuBar()
        m = bar.addMenu("&File")
        self._action(m, "&New", self.new_design, QKeySequence.New, "new")
        self._action(m, "&Open…", self.open_dialog, QKeySequence.Open, "open")
        self.samples_menu = m.addMenu("Open sa&mple")
        self.samples_menu.aboutToShow.connect(self._fill_samples_menu)
        self.recent_menu = m.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent_menu)
        m.addSeparator()
        self._action(m, "&Save", self.save, QKeySequence.Save, "save")
        self._action(m, "Save &as…", self.save_as, QKeySequence("Ctrl+Shift+S"), "save_as")
        m.addSeparator()
        ex = m.addMenu("&Export")
        for kind, text in (("bom", "Bill of materials (CSV)…"), ("spice", "SPICE netlist…"),
                           ("json", "Results (JSON)…"), ("png", "Plot as PNG…"), ("svg", "Plot as SVG…")):
            self._action(ex, text, lambda _=False, k=kind: self._on_export_requested(k), None, f"export_{kind}")
        self._action(m, "Export review &report…", self.report_dialog, None, "export_report")
        self._action(m, "Open &measured data…", self.measured_dialog, None, "open_measured")
        m.addSeparator()
        self._action(m, "&Quit", self.close, QKeySequence("Ctrl+Q"), "quit")

        m = bar.addMenu("&Edit")
        undo = self.model.undo_stack.createUndoAction(self, "&Undo")
        undo.setShortcuts([QKeySequence.Undo])
        redo = self.model.undo_stack.createRedoAction(self, "&Redo")
        redo.setShortcuts([QKeySequence("Ctrl+Y"), QKeySequence("Ctrl+Shift+Z")])
        m.addAction(undo)
        m.addAction(redo)
        self.undo_action, self.redo_action = undo, redo
        m.addSeparator()
        self._action(m, "&Copy parts as text", self.parts.copy_parts, QKeySequence("Ctrl+Shift+C"), "copy_parts")
        self._action(m, "&Keep parts in design", self.model.fix_parts, None, "fix_parts")
        self._action(m, "&Synthesise parts from targets", self.model.release_parts, None, "release_parts")

        m = bar.addMenu("&View")
        self.plant_action = QAction("Show &plant Gvd", self, checkable=True)
        self.plant_action.setShortcut(QKeySequence("Ctrl+P"))
        self.plant_action.toggled.connect(self.bode.set_show_plant)
        self.comp_action = QAction("Show &compensator", self, checkable=True)
        self.comp_action.setShortcut(QKeySequence("Ctrl+K"))
        self.comp_action.toggled.connect(self.bode.set_show_compensator)
        m.addAction(self.plant_action)
        m.addAction(self.comp_action)
        self._action(m, "&Fit plot", self.bode.fit, QKeySequence("Ctrl+0"), "fit")
        self._action(m, "Show &parts", lambda: self.side_tabs.setCurrentWidget(self.parts), None, "show_parts")
        self._action(m, "Show c&orners", lambda: self.side_tabs.setCurrentWidget(self.corners), None, "show_corners")

        m = bar.addMenu("&Tools")
        self._action(m, "Dense &input-voltage sweep…", self.open_sweep, QKeySequence("Ctrl+Shift+W"), "sweep")
        self._action(m, "&Switching check…", self.open_switching, None, "switching")
        self._action(m, "&Efficiency per corner…", lambda: open_efficiency(self), None, "efficiency")
        self._action(m, "&Tolerance study…", self.open_study, None, "study")

        m = bar.addMenu("&Help")
        self._action(m, "&Cautions…", self.show_cautions, None, "cautions")
        self._action(m, "&About loopkit…", self.show_about, None, "about")

    def _fill_samples_menu(self) -> None:
        self.samples_menu.clear()
        files = sorted(SAMPLES_DIR.glob("*.toml")) if SAMPLES_DIR.is_dir() else []
        for p in files:
            act = self.samples_menu.addAction(p.stem.replace("_", " "))
            act.triggered.connect(lambda _=False, p=p: self.open_path(p))
        if not files:
            self.samples_menu.addAction("(no samples found)").setEnabled(False)

    def _fill_recent_menu(self) -> None:
        self.recent_menu.clear()
        paths = self.recent.paths()
        for p in paths:
            act = self.recent_menu.addAction(p)
            act.triggered.connect(lambda _=False, p=p: self.open_path(p))
        if not paths:
            self.recent_menu.addAction("(none yet)").setEnabled(False)

    # ------------------------------------------------------------------ title, status
    def _update_title(self) -> None:
        name = Path(self.model.path).name if self.model.path else "untitled"
        self.setWindowTitle(f"{name}[*] — loopkit")
        self.setWindowModified(self.model.dirty)

    def _on_dirty_changed(self, dirty: bool) -> None:
        self.setWindowModified(dirty)
        if not dirty:
            self.recovery.discard()
            self._autosaved_text = None

    def _on_path_changed(self, path: str) -> None:
        self._update_title()

    def _show_error(self, message: str) -> None:
        """A rejection in the status bar, until a valid value is applied (or 20 s pass)."""
        self.statusBar().showMessage(message, 20000)
        self._status_error = message

    def _on_value_applied(self, *_) -> None:
        """A value was accepted: an error still shown in the status bar no longer holds."""
        if self._status_error is not None and self.statusBar().currentMessage() == self._status_error:
            self.statusBar().clearMessage()
        self._status_error = None

    def _on_field_invalid(self, field: str, message: str) -> None:
        self._show_error(f"Not applied — {message}")

    def _on_form_message(self, message: str) -> None:
        if message:
            self._show_error(f"Not applied — {message}")

    def _on_busy_changed(self, busy: bool, text: str) -> None:
        for w in (self.busy_label, self.busy_bar, self.busy_cancel):
            w.setVisible(busy)
        self.busy_label.setText(text)
        if not busy and text == "cancelled":
            self.statusBar().showMessage("Computation cancelled: the previous design stays.", 5000)

    def _on_compute_failed(self, message: str) -> None:
        self._show_error(message)

    # ------------------------------------------------------------------ marker
    def _on_marker_moved(self, f_hz: float) -> None:
        self.model.preview_targets(fc_hz=nice_hz(f_hz))

    def _on_marker_released(self, f_hz: float) -> None:
        self.model.end_preview(f"Drag crossover target to {format_value(nice_hz(f_hz), 'Hz')}")

    # ------------------------------------------------------------------ files
    def maybe_save(self) -> bool:
        """Ask about unsaved changes; False means the user cancelled."""
        if not self.model.dirty:
            return True
        name = Path(self.model.path).name if self.model.path else "the untitled design"
        answer = QMessageBox.question(self, "Unsaved changes", f"Save the changes to {name}?",
                                      QMessageBox.Save | QMessageBox.Discard | QMessageBox.Cancel,
                                      QMessageBox.Save)
        if answer == QMessageBox.Save:
            return self.save()
        return answer == QMessageBox.Discard

    def new_design(self) -> None:
        if not self.maybe_save():
            return
        from .viewmodel import starter_design

        self.recovery.discard()
        self.model.reset(starter_design())
        self._update_title()

    def open_dialog(self) -> None:
        if not self.maybe_save():
            return
        start = str(Path(self.model.path).parent) if self.model.path else str(SAMPLES_DIR if SAMPLES_DIR.is_dir()
                                                                              else Path.home())
        path, _ = QFileDialog.getOpenFileName(self, "Open design", start, _FILTER)
        if path:
            self.open_path(path, ask=False)

    def open_path(self, path, ask: bool = True) -> bool:
        """Open a design file; a file loopkit cannot use is reported, and the current design stays."""
        if ask and not self.maybe_save():
            return False
        try:
            self.model.open(path)
        except DesignError as exc:
            return self._open_failed(str(exc))
        except OSError as exc:
            return self._open_failed(f"{path}: {exc.strerror or exc}")
        except Exception as exc:  # noqa: BLE001 - a computation that fails on this design: say so, keep the old one
            traceback.print_exc(file=sys.stderr)
            return self._open_failed(f"{path}: the loop of this design cannot be computed ({type(exc).__name__}: "
                                     f"{str(exc)[:200]}); the design shown is unchanged")
        self.recovery.discard()
        self.recent.add(path)
        self._update_title()
        self.statusBar().showMessage(f"Opened {path}", 5000)
        return True

    def _open_failed(self, message: str) -> bool:
        """A design that cannot be opened: the reason in the status bar and a dialog; the current design stays."""
        self.statusBar().showMessage(f"Not opened — {message}", 20000)
        QMessageBox.warning(self, "Cannot open the design", message)
        return False

    def save(self) -> bool:
        if not self.model.path:
            return self.save_as()
        return self._save_to(self.model.path)

    def save_as(self) -> bool:
        start = self.model.path or str(Path.home() / "design.toml")
        path, _ = QFileDialog.getSaveFileName(self, "Save design as", start, _FILTER)
        if not path:
            return False
        if not path.lower().endswith(".toml"):
            path += ".toml"
        return self._save_to(path)

    def _save_to(self, path: str) -> bool:
        try:
            written = self.model.save(path)
        except OSError as exc:
            QMessageBox.warning(self, "Cannot save", f"{path}: {exc.strerror}")
            return False
        self.recent.add(written)
        self.recovery.discard()
        self._update_title()
        self.statusBar().showMessage(f"Saved {written}", 5000)
        return True

    # ------------------------------------------------------------------ autosave and recovery
    def autosave(self) -> bool:
        """Write unsaved work to the recovery folder (only when it changed); True if written."""
        if not self.model.dirty:
            return False
        text = self.model.toml_text()
        if text == self._autosaved_text:
            return False
        self.recovery.write(text, self.model.path)
        self._autosaved_text = text
        return True

    def offer_recovery(self) -> bool:
        """Offer to restore work left by a session that did not end cleanly; True if restored."""
        restored = False
        leftovers = self.recovery.leftovers()
        if self.recovery.set_aside:  # reported once: they are moved out of the way
            lines = [f"{path}: {why}" for path, why in self.recovery.set_aside]
            QMessageBox.warning(self, "Recovery copy set aside",
                                "loopkit found unsaved work it cannot read and moved it aside:\n" + "\n".join(lines))
        for entry in leftovers:
            if restored:
                Recovery.remove(entry)
                continue
            answer = QMessageBox.question(
                self, "Restore unsaved work?",
                f"loopkit stopped last time without saving {entry.label}.\nRestore that work now?",
                QMessageBox.Yes | QMessageBox.No, QMessageBox.Yes)
            if answer == QMessageBox.Yes:
                try:
                    design = loads_design(entry.toml_path.read_text(encoding="utf-8"), str(entry.toml_path))
                    self.model.restore(design, entry.original)
                except (ValueError, OSError) as exc:  # DesignError and bad UTF-8 are ValueErrors
                    QMessageBox.warning(self, "Cannot restore", str(exc))
                except Exception as exc:  # noqa: BLE001 - a computation that fails: report, go on starting
                    traceback.print_exc(file=sys.stderr)
                    QMessageBox.warning(self, "Cannot restore", f"{entry.label}: the loop cannot be computed "
                                        f"({type(exc).__name__}: {str(exc)[:200]})")
                else:
                    restored = True
                    self._update_title()
                    self.autosave()
            Recovery.remove(entry)
        return restored

    # ------------------------------------------------------------------ export
    def export_to(self, kind: str, path: str) -> None:
        """Write one hand-off file: ``bom``, ``spice``, ``json`` (from the current result) or ``png``/``svg``."""
        if kind in ("png", "svg"):
            with atomic_path(path) as tmp:  # the same writer, permissions and atomicity as every other file
                self.bode.export_image(str(tmp))
            return
        from loopkit import export

        result = self.model.result
        if not result.feasible:
            raise DesignError("compensator", "no parts", "the targets are not feasible: nothing to export")
        text = {"bom": export.bom_csv, "spice": export.spice_netlist, "json": export.results_json}[kind](result)
        write_export(path, text)  # loopkit's writer: the command line's permissions, atomic

    def _on_export_requested(self, kind: str) -> None:
        suffix = {"bom": "csv", "spice": "cir", "json": "json", "png": "png", "svg": "svg"}[kind]
        stem = Path(self.model.path).stem if self.model.path else "design"
        start = str((Path(self.model.path).parent if self.model.path else Path.home()) / f"{stem}.{suffix}")
        if kind in ("png", "svg"):
            start = start.replace(f"{stem}.", f"{stem}-bode.")
        path, _ = QFileDialog.getSaveFileName(self, "Export", start, f"*.{suffix}")
        if not path:
            return
        try:
            self.export_to(kind, path)
        except (DesignError, OSError) as exc:
            QMessageBox.warning(self, "Cannot export", str(exc))
            return
        self.statusBar().showMessage(f"Wrote {path}", 5000)

    # ------------------------------------------------------------------ dialogs
    def show_cautions(self) -> None:
        QMessageBox.information(self, "Cautions", CAUTIONS_HTML)

    def show_about(self) -> None:
        QMessageBox.about(self, "About loopkit", ABOUT_HTML)

    def _on_cautions_acknowledged(self) -> None:
        write_text_atomic(self._data_dir / "cautions-read", "read\n")
        self.caution_banner.setVisible(False)

    def open_sweep(self):
        from .sweep import SweepDialog

        dialog = SweepDialog(self.model, self)
        dialog.show()
        dialog.start()
        return dialog

    def open_switching(self):
        from .switching_view import SwitchingDialog

        dialog = SwitchingDialog(self.model, self)
        dialog.show()
        dialog.start()
        return dialog

    def open_study(self):
        from .study_view import StudyDialog

        dialog = StudyDialog(self.model, self.bode, self)
        dialog.show()
        dialog.start()
        return dialog

    # ------------------------------------------------------------------ measured data and the review report
    def open_measured(self, path: str, kind: str = "loop", corner: int | None = None, columns: dict | None = None):
        """Open a bench measurement over the prediction of ``corner``; returns its window (None if refused)."""
        from loopkit.measured import read_measurement

        from .measured_view import MeasuredWindow

        try:
            measurement = read_measurement(path, kind, columns)
            window = MeasuredWindow(self.model, measurement, corner, self)
        except DesignError as exc:
            QMessageBox.warning(self, "Cannot open the measurement", str(exc))
            return None
        except OSError as exc:
            QMessageBox.warning(self, "Cannot open the measurement", f"{path}: {exc.strerror or exc}")
            return None
        self._measured_windows = [w for w in getattr(self, "_measured_windows", []) if w.isVisible()] + [window]
        window.show()
        self.statusBar().showMessage(f"Opened {path}", 5000)
        return window

    def measured_dialog(self) -> None:
        from PySide6.QtWidgets import QInputDialog

        from loopkit.measured_overlay import KIND_TITLES

        start = str(Path(self.model.path).parent) if self.model.path else str(Path.home())
        path, _ = QFileDialog.getOpenFileName(self, "Open measured data", start,
                                              "Measurements (*.csv *.txt *.tsv *.dat);;All files (*)")
        if not path:
            return
        titles = [f"{title} ({kind})" for kind, title in KIND_TITLES.items()]
        choice, ok = QInputDialog.getItem(self, "Measured data", "What was measured?", titles, 0, False)
        if ok:
            self.open_measured(path, list(KIND_TITLES)[titles.index(choice)])

    def export_report(self, path: str, options=None) -> None:
        """Write the design-review report (``.pdf``: through headless Chromium; else HTML), with the
        overlays of the measurement windows that are open and the optional sections of ``options``
        (:class:`app.report_options.ReportOptions`; default: efficiency only)."""
        from loopkit.report import write_report
        from loopkit.report.sections import review_sections

        from .report_options import ReportOptions

        overlays = [w.overlay for w in getattr(self, "_measured_windows", []) if w.isVisible() and w.overlay]
        pdf = path.lower().endswith(".pdf")
        extra = review_sections(self.model.design, self.model.result, **(options or ReportOptions()).keywords())
        write_report(self.model.result, None if pdf else path, path if pdf else None,
                     path=self.model.path or "", overlays=overlays, extra_sections=extra)

    def report_dialog(self) -> None:
        stem = Path(self.model.path).stem if self.model.path else "design"
        start = str((Path(self.model.path).parent if self.model.path else Path.home()) / f"{stem}-review.html")
        path, chosen = QFileDialog.getSaveFileName(self, "Export review report", start,
                                                   "Report page (*.html);;Report as PDF (*.pdf)")
        if not path:
            return
        if not path.lower().endswith((".html", ".htm", ".pdf")):
            path += ".pdf" if "pdf" in chosen.lower() else ".html"
        from .report_options import ReportOptionsDialog

        choose = ReportOptionsDialog(not self.model.design.tolerances.empty, bool(self.model.result.feasible), self)
        if choose.exec() != ReportOptionsDialog.Accepted:
            return
        self.statusBar().showMessage("Writing the review report…")
        QApplication.setOverrideCursor(Qt.WaitCursor)
        try:
            self.export_report(path, choose.options())
        except (DesignError, OSError) as exc:
            QApplication.restoreOverrideCursor()
            QMessageBox.warning(self, "Cannot write the report", str(exc))
            return
        QApplication.restoreOverrideCursor()
        self.statusBar().showMessage(f"Wrote {path}", 5000)

    # ------------------------------------------------------------------ closing
    def closeEvent(self, event) -> None:
        if not self.maybe_save():
            event.ignore()
            return
        self._autosave_timer.stop()
        self.recovery.discard()
        event.accept()
