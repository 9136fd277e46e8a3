"""House rules: the layer contract (imports go down the layers, never up or sideways) and a
core usable headless (common practice, no source)."""

from __future__ import annotations

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "calibra"
QT_MODULES = ("PySide6", "pyqtgraph", "shiboken6")

#: The layers, lowest first, each with its units: a package, or a module directly under
#: calibra/ (``calibra`` itself is the package's ``__init__.py``). A module may import its own
#: unit, any unit of a lower layer, and a unit of its own layer only where SIDEWAYS says so.
#: DEVELOPERS.md's architecture table gives every unit a row under its layer's name.
LAYERS: list[tuple[str, tuple[str, ...]]] = [
    ("base", ("calibra", "calibra.model", "calibra.progress")),
    ("site data", ("calibra.io",)),
    ("estimation", ("calibra.estimation",)),
    ("diagnosis", ("calibra.diagnosis",)),
    # The simulator writes faults in the findings' vocabulary; nothing in calibra imports it.
    ("simulation", ("calibra.simulate",)),
    ("records", ("calibra.ledger", "calibra.reports")),
    ("open work", ("calibra.open_work",)),
    # The period a review looks at, chosen, corrected and prepared once for every engine.
    ("period", ("calibra.review_period",)),
    # Engines a review is handed (a PeriodEngine); they never import the review.
    ("engines", ("calibra.cluster",)),
    ("application", ("calibra.review_run", "calibra.app_settings")),
    ("desktop", ("calibra.gui",)),
    ("command line", ("calibra.cli", "calibra.__main__")),
]
#: Imports between units of one layer that the contract allows: (importer, imported) → why.
SIDEWAYS: dict[tuple[str, str], str] = {
    ("calibra.__main__", "calibra.cli"): "python -m calibra runs the command line",
    ("calibra.reports", "calibra.ledger"): "work orders list the findings in the ledger's open "
                                           "states",
}
#: Imports that break the contract today and are being removed: (module, unit) → by what.
KNOWN_VIOLATIONS: dict[tuple[str, str], str] = {}


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


# ----------------------------------------------------------------------------- layer contract
def _module_name(path: Path) -> str:
    parts = path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _unit(module: str) -> str:
    """The unit a module belongs to: ``calibra.x`` for anything in calibra/x/ or calibra/x.py,
    ``calibra`` for the package's ``__init__.py``."""
    return ".".join(module.split(".")[:2])


def _is_unit(name: str) -> bool:
    rel = name.split(".")[1]
    return (PACKAGE / rel).is_dir() or (PACKAGE / f"{rel}.py").is_file()


def _calibra_imports(path: Path) -> set[str]:
    """Every calibra module ``path`` imports (at the top or inside a function), by full name;
    ``from calibra import x`` counts as importing calibra.x when x is a unit."""
    module = _module_name(path)
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:  # relative: from its own package upwards
                anchor = package.split(".")[:len(package.split(".")) - node.level + 1]
                base = ".".join([*anchor, *([node.module] if node.module else [])])
            found.add(base)
            if base == "calibra":
                found |= {f"calibra.{a.name}" for a in node.names
                          if _is_unit(f"calibra.{a.name}")}
    return {n for n in found if n == "calibra" or n.startswith("calibra.")}


def _layer_of() -> dict[str, int]:
    return {unit: i for i, (_, units) in enumerate(LAYERS) for unit in units}


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _edges() -> list[tuple[str, str]]:
    """(importing module, imported unit) for every import of another unit."""
    return sorted({(module, _unit(name)) for module, path in _modules().items()
                   for name in _calibra_imports(path) if _unit(name) != _unit(module)})


def test_every_unit_is_in_one_layer():
    on_disk = {_unit(m) for m in _modules()}
    listed = [unit for _, units in LAYERS for unit in units]
    assert sorted(on_disk - set(listed)) == [], "add them to LAYERS (and to DEVELOPERS.md)"
    assert sorted(set(listed) - on_disk) == [], "no longer in calibra/: remove from LAYERS"
    assert len(listed) == len(set(listed)), "a unit is in two layers"


def test_imports_go_down_the_layers():
    """An import of a higher layer, or of another unit of the same layer that SIDEWAYS does not
    allow, breaks the contract; KNOWN_VIOLATIONS are the ones being removed."""
    layer = _layer_of()
    names = [name for name, _ in LAYERS]
    broken = []
    for module, imported in _edges():
        a, b = layer.get(_unit(module)), layer.get(imported)
        if a is None or b is None:
            broken.append(f"{module} imports {imported}: {_unit(module) if a is None else imported}"
                          " is in no layer")
            continue
        if b < a or (a == b and (_unit(module), imported) in SIDEWAYS):
            continue
        if (module, imported) not in KNOWN_VIOLATIONS:
            where = "its own layer" if a == b else f"{names[b]}, above {names[a]}"
            broken.append(f"{module} imports {imported} ({where})")
    assert not broken, "\n".join(broken)


def test_known_violations_are_still_there():
    """An entry whose import is gone must leave KNOWN_VIOLATIONS, so that it cannot return."""
    edges = set(_edges())
    gone = [f"{m} no longer imports {u}: remove the entry" for m, u in KNOWN_VIOLATIONS
            if (m, u) not in edges]
    assert not gone, "\n".join(gone)


def test_the_contributor_guide_lists_every_unit_under_its_layer():
    """DEVELOPERS.md's architecture table: a row (``| layer | `calibra/…` | … |``) for every
    unit, with the layer LAYERS gives it."""
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    rows = re.findall(r"^\| ([a-z ]+) \| `(calibra/[^`]*)` \|", text, flags=re.MULTILINE)
    documented: dict[str, set[str]] = {}
    for layer_name, path in rows:
        unit = _unit(path.removesuffix(".py").removesuffix("/__init__").rstrip("/")
                     .replace("/", "."))
        documented.setdefault(unit, set()).add(layer_name)
    expected = {unit: {name} for name, units in LAYERS for unit in units}
    assert documented == expected
