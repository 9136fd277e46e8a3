"""Long work (loading a site, a review) in a worker thread, so the window never freezes.

A job is a plain function ``fn(progress) -> result``. :class:`JobRunner` lives in the GUI
thread: it moves a small worker object to a ``QThread``, and every signal the worker emits
(progress, result, failure, cancellation) reaches the runner's slots through a queued
connection and is emitted again from the GUI thread. Cancelling calls
:meth:`calibra.progress.Progress.cancel`; the job stops at its next progress update.
"""

from __future__ import annotations

import gc
import traceback
from collections.abc import Callable
from typing import Any

from PySide6.QtCore import QObject, QThread, Signal, Slot

from calibra.progress import Cancelled, Progress


class _Worker(QObject):
    """Runs one job function in the worker thread."""

    progressed = Signal(int, int, str)
    succeeded = Signal(object)
    failed = Signal(object)
    stopped = Signal()

    def __init__(self, fn: Callable[[Progress], Any]):
        super().__init__()
        self._fn = fn
        self.progress = Progress(self._report)

    def _report(self, done: int, total: int, message: str) -> None:
        self.progressed.emit(int(done), int(total), str(message))

    @Slot()
    def run(self) -> None:
        try:
            result = self._fn(self.progress)
        except Cancelled:
            self.stopped.emit()
        except Exception as exc:  # the window shows it; the thread must not die silently
            exc.details = traceback.format_exc()  # type: ignore[attr-defined]
            self.failed.emit(exc)
        else:
            if self.progress.cancelled:
                self.stopped.emit()
            else:
                self.succeeded.emit(result)


class JobRunner(QObject):
    """Runs one job at a time off the GUI thread and relays its signals into the GUI thread.

    Signals: ``progressed(done, total, message)``, ``finished(name, result)``,
    ``failed(name, exception)``, ``cancelled(name)``, and ``idle()`` after any of the last three.
    """

    progressed = Signal(int, int, str)
    finished = Signal(str, object)
    failed = Signal(str, object)
    cancelled = Signal(str)
    idle = Signal()

    def __init__(self, parent: QObject | None = None):
        super().__init__(parent)
        self._thread: QThread | None = None
        self._worker: _Worker | None = None
        self.name = ""

    @property
    def busy(self) -> bool:
        return self._thread is not None

    def start(self, name: str, fn: Callable[[Progress], Any]) -> None:
        """Start ``fn(progress)`` in a new worker thread; refused while a job runs."""
        if self.busy:
            raise RuntimeError(f"'{self.name}' is still running")
        self.name = name
        # Python collects garbage in whichever thread allocates. A collection in the worker
        # would destroy the window's discarded Qt objects from the wrong thread (Qt warns
        # "Timers cannot be started from another thread" and may crash). So nothing is
        # collected while a job runs; the GUI thread collects once it has ended.
        self._gc_was_enabled = gc.isenabled()
        gc.collect()
        gc.disable()
        thread = QThread()
        thread.setObjectName(f"calibra-{name}")
        worker = _Worker(fn)
        worker.moveToThread(thread)
        worker.progressed.connect(self._on_progressed)
        worker.succeeded.connect(self._on_succeeded)
        worker.failed.connect(self._on_failed)
        worker.stopped.connect(self._on_stopped)
        thread.started.connect(worker.run)
        self._thread, self._worker = thread, worker
        thread.start()

    def cancel(self) -> None:
        """Ask the running job to stop at its next progress update."""
        if self._worker is not None:
            self._worker.progress.cancel()

    def shutdown(self, ms: int = 60000) -> bool:
        """Cancel the job and block until its thread has ended (when the window closes);
        nothing is relayed afterwards."""
        thread, worker = self._thread, self._worker
        if thread is None or worker is None:
            return True
        for signal in (worker.progressed, worker.succeeded, worker.failed, worker.stopped):
            signal.disconnect()
        worker.progress.cancel()
        thread.quit()  # the event loop ends once the job function has returned
        ended = thread.wait(ms)
        self._thread = self._worker = None
        self._restore_gc()
        return ended

    # ---- relayed in the GUI thread ------------------------------------------------------
    @Slot(int, int, str)
    def _on_progressed(self, done: int, total: int, message: str) -> None:
        if self._worker is not None and not self._worker.progress.cancelled:
            self.progressed.emit(done, total, message)

    @Slot(object)
    def _on_succeeded(self, result: object) -> None:
        name = self._end()
        self.finished.emit(name, result)
        self.idle.emit()

    @Slot(object)
    def _on_failed(self, exc: object) -> None:
        name = self._end()
        self.failed.emit(name, exc)
        self.idle.emit()

    @Slot()
    def _on_stopped(self) -> None:
        name = self._end()
        self.cancelled.emit(name)
        self.idle.emit()

    def _end(self) -> str:
        thread = self._thread
        if thread is not None:
            thread.quit()
            thread.wait()  # the thread has ended: the worker can go with it
        self._thread = self._worker = None
        self._restore_gc()
        return self.name

    def _restore_gc(self) -> None:
        if getattr(self, "_gc_was_enabled", False):
            gc.enable()
            gc.collect()
