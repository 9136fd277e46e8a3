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


def test_core_imports_without_qt():
    """The numerical core, the review and the command line import with Qt unavailable (checked
    in a fresh interpreter where importing PySide6 or pyqtgraph fails)."""
    import subprocess
    import sys

    blocked = "; ".join(f"sys.modules[{m!r}] = None" for m in QT_MODULES)
    code = (f"import sys; {blocked}; import calibra.estimation.week, calibra.diagnosis.review, "
            "calibra.review_run, calibra.cli; print('ok')")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"


def test_nothing_below_the_desktop_layer_imports_it():
    """Layers: gui → reports/ledger → diagnosis → estimation → model/io; only the desktop
    package and the command line (which hands the PDF printer down) may import calibra.gui."""
    offenders = []
    for path in PACKAGE.rglob("*.py"):
        rel = path.relative_to(PACKAGE)
        if rel.parts[0] == "gui" or rel.name.startswith("cli"):
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import) else
                     [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            if any(n == "calibra.gui" or n.startswith("calibra.gui.") for n in names):
                offenders.append(str(rel))
    assert offenders == []
