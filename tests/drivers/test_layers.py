"""Layering (DESIGN.md "Layers"): drivers never import sequencer; only drivers/transport.py imports
pyvisa (STYLE.md §3).  Checked on the import statements of every module (AST, not text search)."""

import ast
from pathlib import Path

DRIVERS = Path(__file__).resolve().parents[2] / "drivers"


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def test_drivers_never_import_sequencer():
    offenders = [
        str(p.relative_to(DRIVERS))
        for p in DRIVERS.rglob("*.py")
        if any(m == "sequencer" or m.startswith("sequencer.") for m in imported_modules(p))
    ]
    assert offenders == []


def test_only_the_transport_imports_pyvisa():
    importers = sorted(
        str(p.relative_to(DRIVERS))
        for p in DRIVERS.rglob("*.py")
        if any(m.split(".")[0] in ("pyvisa", "pyvisa_py") for m in imported_modules(p))
    )
    assert importers == ["transport.py"]
