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
    """A :class:`Progress` for a terminal stream (stderr by default): one bar per stage that
    never runs backwards (workers finish blocks out of order), redrawn in place on a terminal;
    when the stream is not a terminal (a log file), plain lines at 0, 25, 50, 75 and 100 %."""
    out = stream or sys.stderr
    tty = bool(getattr(out, "isatty", lambda: False)())
    state = {"last": 0.0, "message": None, "frac": 0.0, "open": False, "step": -1,
             "done": False}

    def draw(done: int, total: int, message: str) -> None:
        if message != state["message"]:
            if state["open"]:
                out.write("\n")
            state.update(message=message, frac=0.0, open=False, step=-1, last=0.0, done=False)
        if state["done"]:
            return
        frac = max(state["frac"], min(max(done / total, 0.0), 1.0) if total > 0 else 0.0)
        state["frac"] = frac
        final = frac >= 1.0
        if tty:
            now = time.monotonic()
            if not final and now - state["last"] < min_interval:
                return
            state["last"] = now
            bar = "#" * int(round(frac * width))
            out.write(f"\r{message[:40]:<40} [{bar:<{width}}] {100 * frac:5.1f}%")
            state["open"] = not final
            if final:
                out.write("\n")
        else:
            step = int(frac * 4)
            if step == state["step"]:
                return
            state["step"] = step
            out.write(f"{message}: {25 * step} %\n")
        state["done"] = final
        out.flush()

    return Progress(draw)
