"""A guard against a reference-count defect of some PySide6 wheels on Python before 3.12.

PySide6 ships one "abi3" wheel for every Python from 3.10 on. Built with 3.12+ headers, where
``None``, ``True`` and ``False`` are immortal (PEP 683), such a wheel can return them without
counting the reference; on 3.11, where they are ordinary objects, every ``void`` Qt call (and
every signal emit, which returns ``True``) then takes one reference away for good. Measured here
with PySide6 6.12 on Python 3.11: one per call. After some tens of thousands of calls, or at
interpreter exit, Python aborts with "Fatal Python error: none_dealloc".

:func:`protect_singletons` detects the defect with a few probe calls and, only when it is
present, gives the three singletons a reference count no session can exhaust (what Python
3.12 does by design). On a sound PySide6 or on Python 3.12+ it does nothing.
"""

from __future__ import annotations

import ctypes
import sys

from PySide6.QtCore import QObject, Signal

_HEADROOM = 1 << 40
_PROBES = 256
_done = False


class _Probe(QObject):
    ping = Signal()


def leaks_references() -> dict[str, bool]:
    """Whether ``None`` (a void call) and ``True`` (a signal emit) lose references per call."""
    probe = _Probe()
    before = sys.getrefcount(None), sys.getrefcount(True)
    for _ in range(_PROBES):
        probe.setObjectName("probe")
        probe.ping.emit()
    after = sys.getrefcount(None), sys.getrefcount(True)
    # A sound binding changes neither by more than a handful over the probe loop.
    return {"None": before[0] - after[0] > _PROBES // 2,
            "True": before[1] - after[1] > _PROBES // 2}


def protect_singletons() -> bool:
    """Apply the guard when needed (once per process); True when it was applied."""
    global _done
    if _done or sys.version_info >= (3, 12) or sys.implementation.name != "cpython":
        return False
    _done = True
    if not any(leaks_references().values()):
        return False
    for singleton in (None, True, False):
        # ob_refcnt is the first field of every CPython object (release builds).
        count = ctypes.c_ssize_t.from_address(id(singleton))
        count.value += _HEADROOM
    return True
