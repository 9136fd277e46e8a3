"""House rules that keep the core usable headless (common practice, no source)."""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "calibra"
QT_MODULES = ("PySide6", "pyqtgraph", "shiboken6")


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module.split(".")[0])
    return names


def test_qt_only_under_gui():
    offenders = [str(p.relative_to(PACKAGE)) for p in PACKAGE.rglob("*.py")
                 if "gui" not in p.relative_to(PACKAGE).parts[:1]
                 and _imports(p) & set(QT_MODULES)]
    assert offenders == []


def test_core_imports_without_qt(monkeypatch):
    """The numerical core and the review import with Qt unavailable."""
    import importlib
    import sys

    for mod in list(sys.modules):
        if mod.startswith(QT_MODULES):
            monkeypatch.delitem(sys.modules, mod)
    monkeypatch.setattr("builtins.__import__", _blocking_import(__import__))
    for name in ("calibra.estimation.week", "calibra.diagnosis.review", "calibra.review_run",
                 "calibra.cli"):
        sys.modules.pop(name, None)
        importlib.import_module(name)


def _blocking_import(real):
    def fake(name, *args, **kwargs):
        if name.split(".")[0] in QT_MODULES:
            raise ImportError(f"{name} blocked by the test")
        return real(name, *args, **kwargs)

    return fake
