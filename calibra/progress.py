"""Progress reporting and cancellation for long jobs, free of any GUI toolkit.

A job calls :meth:`Progress.update` now and then; the terminal shows a bar, the GUI a progress
bar, both from the same callback. :meth:`Progress.cancel` (from any thread) makes the next
``update`` raise :class:`Cancelled`, so the job stops at a clean point.
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable


class Cancelled(Exception):
    """The user cancelled the job."""


class Progress:
    """Thread-safe progress sink with a cancel flag."""

    def __init__(self, callback: Callable[[int, int, str], None] | None = None):
        self._callback = callback
        self._cancel = threading.Event()

    def cancel(self) -> None:
        self._cancel.set()

    @property
    def cancelled(self) -> bool:
        return self._cancel.is_set()

    def update(self, done: int, total: int, message: str = "") -> None:
        """Report ``done`` of ``total`` units; raises :class:`Cancelled` if cancelled."""
        if self._cancel.is_set():
            raise Cancelled(message or "cancelled")
        if self._callback is not None:
            self._callback(done, total, message)


def terminal_progress(stream=None, width: int = 30, min_interval: float = 0.2) -> Progress:
    """A :class:`Progress` that draws a one-line bar on a terminal stream (stderr by default)."""
    out = stream or sys.stderr
    state = {"last": 0.0, "message": ""}

    def draw(done: int, total: int, message: str) -> None:
        now = time.monotonic()
        final = total > 0 and done >= total
        if not final and now - state["last"] < min_interval and message == state["message"]:
            return
        state["last"], state["message"] = now, message
        frac = done / total if total else 0.0
        bar = "#" * int(round(frac * width))
        out.write(f"\r{message[:40]:<40} [{bar:<{width}}] {100 * frac:5.1f}%")
        if final:
            out.write("\n")
        out.flush()

    return Progress(draw)
