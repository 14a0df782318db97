"""The view-model: one object that owns the design, its targets and results.

Views take a :class:`DesignModel` in their constructor, subscribe to its
signals and send user actions back through its methods.  The model holds no
engineering formula: results come from :class:`loopkit.loop.LoopSession`, the
same path the command line uses.  What a change recomputes:

- a change of the loop targets (network, crossover, phase margin, boost split,
  design corner, series) only re-runs the existing session (fast: this is the
  slider path);
- any other change of the design builds a new session (power stage and plant
  response at every corner).

Every accepted edit is an undo step on :attr:`DesignModel.undo_stack`; a
rejected edit leaves the last valid design in place and emits
:attr:`DesignModel.field_invalid` with loopkit's message.
"""

from __future__ import annotations

import copy
import re
import sys
import time
import traceback
from dataclasses import fields, replace
from pathlib import Path

from PySide6.QtCore import QObject, QRunnable, QThreadPool, QTimer, Signal
from PySide6.QtGui import QUndoStack

from loopkit import DesignError, dumps_design, load_design, save_design
from loopkit.design import FILE_KEYS, CapacitorBank, Compensator, Design, Operating, Stage
from loopkit.designfile import design_from_dict, design_to_dict
from loopkit.loop import LoopSession, Targets

from .undo import DesignStep

__all__ = ["HEAVY_CORNERS", "RESULTS_KEPT", "TARGET_FIELDS", "DesignModel", "starter_design"]

#: Compensator fields that are loop targets: changing them re-runs the session only.
TARGET_FIELDS = ("network", "fc_hz", "pm_deg", "boost_split", "design_corner", "method", "resistor_series",
                 "capacitor_series")

_FRAME_S = 1.0 / 60.0

#: Designs with more corners than this are computed in a worker thread when edited.
HEAVY_CORNERS = 60
#: Results of the current session kept for targets visited again (a drag back and forth, undo/redo).
RESULTS_KEPT = 24

_PATH_TOKEN = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)(?:\[(\d+)\])?")


def starter_design() -> Design:
    """The design File > New starts from: a plain buck, for the engineer to edit (demo values)."""
    return Design(
        stage=Stage(topology="buck", fsw=500e3, inductance=10e-6, dcr=20e-3, r_switch=30e-3,
                    rectifier="synchronous", r_rectifier=15e-3,
                    output_caps=(CapacitorBank(capacitance=22e-6, esr=3e-3, count=3),)),
        operating=Operating(vout=5.0, vin=(9.0, 12.0, 16.0), load=(0.2, 2.0)),
        compensator=Compensator(network="type3", fc_hz=30e3, pm_deg=60.0),
        title="Untitled design",
    )


def _split_path(path: str) -> list:
    keys: list = []
    for part in path.split("."):
        m = _PATH_TOKEN.fullmatch(part)
        if not m:
            raise ValueError(f"bad field path {path!r}")
        keys.append(m.group(1))
        if m.group(2) is not None:
            keys.append(int(m.group(2)))
    return keys


def _target_key(changes: dict) -> str:
    """The design-file key of the first changed target field (``compensator.fc`` for ``fc_hz``)."""
    name = next(iter(changes))
    return f"compensator.{FILE_KEYS.get(name, name)}"


def _set_path(doc: dict, path: str, value) -> None:
    """Set (or, for ``None``, delete) ``doc[path]`` where path is like ``stage.output_caps[1].esr``."""
    keys = _split_path(path)
    node = doc
    for key in keys[:-1]:
        if isinstance(key, str) and key not in node:
            node[key] = {}
        node = node[key]
    last = keys[-1]
    if value is None:
        if isinstance(node, dict):
            node.pop(last, None)
        else:
            del node[last]
    else:
        node[last] = value


def _targets_only(a: Design, b: Design) -> bool:
    """True when ``a`` and ``b`` differ at most in loop-target fields."""
    if a is None or b is None:
        return False
    if (a.stage, a.operating, a.sensing, a.modulator, a.control, a.title) != (
            b.stage, b.operating, b.sensing, b.modulator, b.control, b.title):
        return False
    if a.losses != b.losses:  # [losses] can change the duty (dead time), so the plant
        return False
    ca, cb = a.compensator, b.compensator
    return all(getattr(ca, f.name) == getattr(cb, f.name) for f in fields(Compensator) if f.name not in TARGET_FIELDS)


class _JobSignals(QObject):
    done = Signal(int, object)  # job id, (session, targets, result) or the exception


class _ComputeJob(QRunnable):
    """A new session and its result for a design with many corners, in a worker thread (numpy only)."""

    def __init__(self, job_id: int, design: Design, signals: _JobSignals):
        super().__init__()
        self._job_id, self._design, self._signals = job_id, design, signals

    def run(self) -> None:
        try:
            session = LoopSession(self._design)
            targets, result = DesignModel._run(session, self._design)
            outcome = (session, targets, result)
        except Exception as exc:  # noqa: BLE001 - handed back to the UI thread, reported at the field
            outcome = exc
        self._signals.done.emit(self._job_id, outcome)


class DesignModel(QObject):
    """Current design, targets, loop session and cached result; emits what changed.

    Signals
    -------
    design_changed(Design)
        The design changed in anything but the loop targets (new session).
    targets_changed(Targets)
        The loop targets changed (also emitted after ``design_changed``).
    results_changed(LoopResult)
        New results for the current design and targets.
    field_invalid(str, str)
        An edit of the field (first) was rejected; loopkit's message (second).
    field_valid(str)
        An edit of the field was accepted.
    dirty_changed(bool)
        Unsaved changes appeared or went away.
    path_changed(str)
        The file the design belongs to ("" for a new design).
    highlight_changed(tuple)
        Corner indices to highlight (empty: none).
    compute_failed(str)
        The loop path raised something other than a design error (a bug).
    busy_changed(bool, str)
        A design with many corners is being computed in the background (True), or that ended.
    """

    design_changed = Signal(object)
    targets_changed = Signal(object)
    results_changed = Signal(object)
    field_invalid = Signal(str, str)
    field_valid = Signal(str)
    dirty_changed = Signal(bool)
    path_changed = Signal(str)
    highlight_changed = Signal(object)
    compute_failed = Signal(str)
    busy_changed = Signal(bool, str)

    def __init__(self, design: Design | None = None, parent=None, path: str = ""):
        super().__init__(parent)
        self.undo_stack = QUndoStack(self)
        self.undo_stack.cleanChanged.connect(self._on_clean_changed)
        self._design: Design | None = None
        self._targets: Targets | None = None
        self._session: LoopSession | None = None
        self._result = None
        self._path = ""
        self._highlight: tuple = ()
        self._prepared: tuple | None = None  # (design, session, result) checked by propose()
        self._drag_start: Design | None = None
        self._job_id = 0
        self._pending: tuple | None = None
        self._job_signals = _JobSignals(self)
        self._job_signals.done.connect(self._on_job_done)
        self._last_compute_s = 0.0
        self._kept: dict = {}  # Targets -> LoopResult of the current session, oldest first
        #: (field, error) of every failure other than a DesignError (a loopkit bug: bad input not refused).
        self.unexpected_errors: list[tuple[str, str]] = []
        self._kept_next: dict | None = None
        self._queued_preview: Design | None = None
        self._result_is_preview = False
        self._preview_timer = QTimer(self)
        self._preview_timer.setSingleShot(True)
        self._preview_timer.timeout.connect(self._flush_preview)
        self.reset(design or starter_design(), str(Path(path).resolve()) if path else "")

    # ------------------------------------------------------------------ state
    @property
    def design(self) -> Design:
        return self._design

    @property
    def targets(self) -> Targets:
        return self._targets

    @property
    def session(self) -> LoopSession:
        return self._session

    @property
    def result(self):
        """The cached :class:`loopkit.loop.LoopResult` of the current design and targets."""
        return self._result

    @property
    def path(self) -> str:
        return self._path

    @property
    def dirty(self) -> bool:
        return not self.undo_stack.isClean()

    @property
    def highlight(self) -> tuple:
        return self._highlight

    @property
    def parts_given(self) -> bool:
        """True when the design carries its own parts (analysed as given, not synthesised)."""
        return bool(self._design.compensator.parts)

    # ------------------------------------------------------------------ computing
    @staticmethod
    def _run(session: LoopSession, design: Design, preview: bool = False):
        targets = Targets.from_design(design)
        return targets, session.run(None if design.compensator.parts else targets, preview=preview)

    def _compute(self, design: Design):
        """(session, targets, result) for ``design``; raises DesignError for input it cannot use.

        Results of the current session are kept for the last :data:`RESULTS_KEPT`
        target sets (synthesised parts only): a drag that comes back over
        targets it passed, or an undo, redraws without recomputing.  The result
        is the library's own for those targets (a run is a pure function of the
        session and the targets).
        """
        if self._prepared is not None and self._prepared[0] is design:
            return self._prepared[1:]
        t0 = time.perf_counter()
        if self._session is not None and _targets_only(self._design, design):
            session = self._session
        else:
            session = LoopSession(design)
        key = None if design.compensator.parts else Targets.from_design(design)
        kept = self._kept if session is self._session else {}
        preview = self.previewing  # a drag may reuse the last searched placement; kept results stay pure
        if key is not None and key in kept:
            targets, result = key, kept.pop(key)
            preview = False
        else:
            targets, result = self._run(session, design, preview)
        self._result_is_preview = preview
        if key is not None and not preview:
            kept[key] = result
            while len(kept) > RESULTS_KEPT:
                kept.pop(next(iter(kept)))
        self._kept_next = kept
        self._last_compute_s = time.perf_counter() - t0
        return session, targets, result

    def _unexpected(self, field: str, exc: BaseException) -> str:
        """The words for a failure loopkit should have refused as bad input: the edit is not applied, the
        field is named, the error is logged (stderr and :attr:`unexpected_errors`) to be reported."""
        traceback.print_exception(exc, file=sys.stderr)
        self.unexpected_errors.append((field, repr(exc)))
        where = f"{field}: " if field else ""
        return (f"{where}loopkit cannot compute the loop with this value ({type(exc).__name__}: {exc}); "
                f"the last valid design stays. Please report it with the design file.")

    def _apply(self, design: Design) -> None:
        """Make ``design`` current (called by undo steps and by :meth:`reset`)."""
        if design is self._design:
            return
        try:
            session, targets, result = self._compute(design)
        except DesignError as exc:  # a design that was valid before: report, keep the old one
            self.compute_failed.emit(str(exc))
            return
        except Exception as exc:  # noqa: BLE001 - never a traceback dialog; keep the last good state
            self.compute_failed.emit(self._unexpected("", exc))
            return
        finally:
            self._prepared = None
        structural = session is not self._session
        self._kept = self._kept_next if self._kept_next is not None else ({} if structural else self._kept)
        self._kept_next = None
        old_targets = self._targets
        self._design, self._session, self._targets, self._result = design, session, targets, result
        if structural:
            n = result.stage.n_corners
            if any(i >= n for i in self._highlight):
                self._highlight = ()
                self.highlight_changed.emit(self._highlight)
            self.design_changed.emit(design)
        if structural or targets != old_targets:
            self.targets_changed.emit(targets)
        self.results_changed.emit(result)

    def propose(self, design: Design, text: str, field: str = "", merge_key: str | None = None) -> bool:
        """Check ``design`` on the loop path and, if it is usable, make it an undo step.

        Returns False (and emits ``field_invalid(field, message)``) when loopkit
        rejects it; the current design stays.  A design with many corners
        (more than :data:`HEAVY_CORNERS`) is computed in a worker thread:
        ``busy_changed`` reports it, :meth:`cancel_pending` drops it, and the
        step is pushed (or the field marked) when it is done.
        """
        self.cancel_pending()
        if design == self._design:
            if field:
                self.field_valid.emit(field)
            return True
        if design.operating.n_corners > HEAVY_CORNERS and not _targets_only(self._design, design):
            self._start_job(design, text, field, merge_key)
            return True
        try:
            session, targets, result = self._compute(design)
        except DesignError as exc:
            self.field_invalid.emit(field, str(exc))
            return False
        except Exception as exc:  # noqa: BLE001 - refused at the field like bad input, logged as a bug
            self.field_invalid.emit(field, self._unexpected(field, exc))
            return False
        self._prepared = (design, session, targets, result)
        self.undo_stack.push(DesignStep(self, self._design, design, text, merge_key))
        if field:
            self.field_valid.emit(field)
        return True

    # ------------------------------------------------------------------ heavy designs off the UI thread
    def _start_job(self, design: Design, text: str, field: str, merge_key: str | None) -> None:
        self._job_id += 1
        job = _ComputeJob(self._job_id, design, self._job_signals)
        self._pending = (self._job_id, design, text, field, merge_key)
        self.busy_changed.emit(True, f"Computing {design.operating.n_corners} corners…")
        QThreadPool.globalInstance().start(job)

    def cancel_pending(self) -> None:
        """Drop a design still being computed in the background (the current one stays)."""
        if self._pending is not None:
            self._pending = None
            self._job_id += 1
            self.busy_changed.emit(False, "cancelled")

    @property
    def pending(self) -> bool:
        return self._pending is not None

    def _on_job_done(self, job_id: int, outcome) -> None:
        if self._pending is None or job_id != self._pending[0]:
            return  # cancelled or superseded
        _, design, text, field, merge_key = self._pending
        self._pending = None
        self.busy_changed.emit(False, "")
        if isinstance(outcome, BaseException):
            message = str(outcome) if isinstance(outcome, DesignError) else self._unexpected(field, outcome)
            self.field_invalid.emit(field, message)
            return
        self._prepared = (design, *outcome)
        self.undo_stack.push(DesignStep(self, self._design, design, text, merge_key))
        if field:
            self.field_valid.emit(field)

    # ------------------------------------------------------------------ edits from forms
    def edit(self, changes: dict, text: str, field: str = "") -> bool:
        """Apply changes given as design-file keys, e.g. ``{"stage.fsw": "400k"}``.

        Values are what the user typed (engineering notation, units allowed) or
        numbers in SI units; ``None`` removes a key.  The design file's parser
        validates them, so messages name the same keys as the file format.
        """
        doc = design_to_dict(self._design)
        doc = copy.deepcopy(doc)
        for path, value in changes.items():
            _set_path(doc, path, value)
        field = field or next(iter(changes))
        try:
            design = design_from_dict(doc)
        except DesignError as exc:
            self.field_invalid.emit(field, str(exc))
            return False
        return self.propose(design, text, field)

    def add_capacitor_bank(self) -> bool:
        banks = self._design.stage.output_caps
        stage = replace(self._design.stage, output_caps=banks + (banks[-1],))
        return self.propose(replace(self._design, stage=stage), "Add capacitor bank", "stage.output_caps")

    def remove_capacitor_bank(self, index: int) -> bool:
        banks = list(self._design.stage.output_caps)
        if len(banks) <= 1 or not 0 <= index < len(banks):
            self.field_invalid.emit("stage.output_caps", "stage.output_caps: the stage needs at least one bank")
            return False
        del banks[index]
        stage = replace(self._design.stage, output_caps=tuple(banks))
        return self.propose(replace(self._design, stage=stage), "Remove capacitor bank", "stage.output_caps")

    # ------------------------------------------------------------------ targets (the slider path)
    def _with_targets(self, changes: dict) -> Design:
        comp = replace(self._design.compensator, parts={}, **changes)
        return replace(self._design, compensator=comp)

    def set_targets(self, text: str, merge_key: str | None = None, **changes) -> bool:
        """One undoable change of loop targets (compensator fields, e.g. ``fc_hz=40e3``).

        Moving a target re-synthesises: parts carried by the design are dropped.
        """
        try:
            design = self._with_targets(changes)
        except DesignError as exc:
            self.field_invalid.emit(_target_key(changes), str(exc))
            return False
        return self.propose(design, text, _target_key(changes), merge_key)

    def begin_preview(self) -> None:
        """Start a live gesture (a drag): previews are not undo steps until :meth:`end_preview`."""
        if self._drag_start is None:
            self._drag_start = self._design

    def preview_targets(self, **changes) -> bool:
        """Live update during a drag: recompute and redraw, no undo step yet."""
        self.begin_preview()
        try:
            design = self._with_targets(changes)
        except DesignError as exc:
            self.field_invalid.emit(_target_key(changes), str(exc))
            return False
        if self._last_compute_s > _FRAME_S:
            # slow designs: moves that arrive while one is computed collapse into the latest
            self._queued_preview = design
            if not self._preview_timer.isActive():
                self._preview_timer.start(0)
            return True
        self._apply(design)
        return True

    def _flush_preview(self) -> None:
        design, self._queued_preview = self._queued_preview, None
        if design is not None:
            self._apply(design)

    def end_preview(self, text: str) -> None:
        """Finish the gesture: one undo step from where it started to where it ended.

        A result computed during the drag may have reused the last searched placement; the
        gesture ends with the library's own answer for the final targets (the CLI's).
        """
        self._preview_timer.stop()
        self._flush_preview()
        start, self._drag_start = self._drag_start, None
        if self._result_is_preview and self._session is not None:
            targets, result = self._run(self._session, self._design)
            self._result, self._result_is_preview = result, False
            self._kept[targets] = result
            self.results_changed.emit(result)
        if start is None or start is self._design or start == self._design:
            return
        # the step's first redo finds ``current`` already applied and does nothing
        self.undo_stack.push(DesignStep(self, start, self._design, text))

    @property
    def previewing(self) -> bool:
        return self._drag_start is not None

    # ------------------------------------------------------------------ parts
    def fix_parts(self) -> bool:
        """Store the current snapped parts in the design (then analysed as given)."""
        from loopkit.loop import apply_parts

        if not self._result.feasible or self._result.digital is not None:  # a digital controller has no parts
            return False
        return self.propose(apply_parts(self._design, self._result), "Keep parts in design", "compensator.parts")

    def release_parts(self) -> bool:
        """Drop the design's given parts: synthesise from the targets again."""
        comp = replace(self._design.compensator, parts={})
        return self.propose(replace(self._design, compensator=comp), "Synthesise parts", "compensator.parts")

    # ------------------------------------------------------------------ highlight
    def set_highlight(self, corners) -> None:
        corners = tuple(int(c) for c in corners)
        if corners != self._highlight:
            self._highlight = corners
            self.highlight_changed.emit(corners)

    # ------------------------------------------------------------------ files
    def reset(self, design: Design, path: str = "") -> None:
        """Replace everything (New, Open): a new session, an empty undo history."""
        self.cancel_pending()
        session = LoopSession(design)  # may raise DesignError: the caller reports it
        targets, result = self._run(session, design)
        self._prepared = (design, session, targets, result)
        self._session = None
        self._design = None
        self._highlight = ()
        self.undo_stack.clear()
        self._apply(design)
        self.undo_stack.setClean()
        self.highlight_changed.emit(self._highlight)
        self._set_path(path)
        self.dirty_changed.emit(False)

    def open(self, path) -> None:
        """Load a design file; raises DesignError (with file and key) if it cannot be used."""
        design = load_design(path)
        self.reset(design, str(Path(path).resolve()))

    def save(self, path=None) -> str:
        """Write the design (atomically); returns the path written."""
        target = str(Path(path).resolve()) if path else self._path
        if not target:
            raise ValueError("no file name: use save(path)")
        save_design(self._design, target)
        self.undo_stack.setClean()
        self._set_path(target)
        return target

    def restore(self, design: Design, path: str = "") -> None:
        """Restore recovered work: the file's design (if any) as base, the recovered one as unsaved."""
        base = None
        if path and Path(path).is_file():
            try:
                base = load_design(path)
            except DesignError:
                base = None
        self.reset(base or design, path if base is not None else "")
        if base is not None and base != design:
            self.propose(design, "Restore unsaved work")
        elif base is None:
            self.undo_stack.resetClean()
            self.dirty_changed.emit(True)

    def toml_text(self) -> str:
        return dumps_design(self._design)

    def _set_path(self, path: str) -> None:
        if path != self._path:
            self._path = path
            self.path_changed.emit(path)

    def _on_clean_changed(self, clean: bool) -> None:
        self.dirty_changed.emit(not clean)
