"""The guard against PySide6 wheels that lose references to None and True on Python 3.11."""

from __future__ import annotations

import sys

from calibra.gui.qt_compat import leaks_references, protect_singletons


def test_guard_leaves_python_able_to_survive_many_qt_calls():
    protect_singletons()
    leaks = leaks_references()
    if sys.version_info < (3, 12) and any(leaks.values()):
        # The defect is present: the singletons must have room for any session (2**39 is
        # far beyond the ~10**3 references a selection in the window can take).
        assert sys.getrefcount(None) > 2**39 and sys.getrefcount(True) > 2**39
    assert protect_singletons() is False  # applied at most once
