"""Long library runs off the UI thread: one worker and one dialog shape for the sweep, the study and the
switching check.

A :class:`BackgroundWorker` subclass implements :meth:`~BackgroundWorker.compute` (the library call,
reporting progress through :meth:`~BackgroundWorker.report`); ``None`` means cancelled.  A
:class:`BackgroundDialog` subclass builds its widgets (``run_button``, ``cancel_button``, ``progress``,
``status``), makes its worker in :meth:`~BackgroundDialog.make_worker` and draws in
:meth:`~BackgroundDialog.show_results`.  No engineering here: the workers call loopkit.
"""

from __future__ import annotations

import sys
import threading
import traceback

from PySide6.QtCore import QObject, QThread, Signal
from PySide6.QtWidgets import QDialog

from loopkit import DesignError

__all__ = ["BackgroundDialog", "BackgroundWorker"]


class BackgroundWorker(QObject):
    """Runs :meth:`compute` in a QThread; emits progress (0-100), the result, or a message."""

    progress = Signal(int)
    finished = Signal(object)
    failed = Signal(str)
    #: What the run does, for the message when loopkit itself fails ("compute this sweep").
    WHAT = "complete this run"

    def __init__(self):
        super().__init__()
        self._cancel = threading.Event()

    def cancel(self) -> None:
        self._cancel.set()

    def cancelled(self) -> bool:
        return self._cancel.is_set()

    def report(self, done, total) -> None:
        self.progress.emit(int(100 * done / max(total, 1)))

    def compute(self):
        """The library call; its result for :attr:`finished`, or None when cancelled."""
        raise NotImplementedError

    def run(self) -> None:
        try:
            data = self.compute()
        except DesignError as exc:
            self.failed.emit(str(exc))
            return
        except Exception as exc:  # noqa: BLE001 - reported in the dialog (and logged): a loopkit bug
            traceback.print_exception(exc, file=sys.stderr)
            self.failed.emit(f"loopkit could not {self.WHAT} ({type(exc).__name__}: {exc}); please report it"
                             " with the design file.")
            return
        if data is None:
            self.failed.emit("cancelled")
            return
        self.finished.emit(data)


class BackgroundDialog(QDialog):
    """Run, cancel, progress and status around one :class:`BackgroundWorker` at a time."""

    #: "No parts to {VERB}: ..." when the design has no feasible result.
    VERB = "run"
    #: Status prefix when a run stops early ("Sweep stopped: cancelled").
    STOPPED = "Stopped"

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self._thread: QThread | None = None
        self._worker: BackgroundWorker | None = None
        self.data = None

    def make_worker(self, result) -> BackgroundWorker:
        raise NotImplementedError

    def show_results(self, data) -> None:
        raise NotImplementedError

    def start(self) -> None:
        result = self._model.result
        if result is None or not result.feasible:
            self.status.setText(f"No parts to {self.VERB}: the targets are not feasible.")
            return
        self.run_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress.setValue(0)
        self.status.setText("Running…")
        self._thread = QThread(self)
        self._worker = self.make_worker(result)
        self._worker.moveToThread(self._thread)
        self._thread.started.connect(self._worker.run)
        self._worker.progress.connect(self.progress.setValue)
        self._worker.finished.connect(self._on_finished)
        self._worker.failed.connect(self._on_failed)
        self._worker.finished.connect(self._thread.quit)
        self._worker.failed.connect(self._thread.quit)
        self._thread.start()

    def cancel(self) -> None:
        if self._worker is not None:
            self._worker.cancel()

    def is_running(self) -> bool:
        return self._thread is not None and self._thread.isRunning()

    def _done(self) -> None:
        self.run_button.setEnabled(True)
        self.cancel_button.setEnabled(False)

    def _on_failed(self, message: str) -> None:
        self._done()
        self.status.setText(f"{self.STOPPED}: {message}")

    def _on_finished(self, data) -> None:
        self._done()
        self.data = data
        self.show_results(data)

    def _stop(self) -> None:
        self.cancel()
        if self._thread is not None:
            self._thread.quit()
            self._thread.wait(10000)

    def closeEvent(self, event) -> None:
        self._stop()
        super().closeEvent(event)

    def reject(self) -> None:
        self._stop()
        super().reject()
