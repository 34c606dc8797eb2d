"""Layering of the sequencer packages (DESIGN.md "Layers and who may import whom"): imports point
down only.  Checked on the absolute import statements of every module (AST, not text search)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

SEQUENCER = Path(__file__).resolve().parents[2] / "sequencer"

# Leaf modules every layer may use (DEVELOPERS.md).
LEAVES = {
    "drivers.errors", "drivers.yamlsafe", "sequencer.errors", "sequencer.events", "sequencer.quantities",
    "sequencer.inputs", "drivers.timing",
    "drivers.trace",  # the one trace record (numpy only) that engine, store and reports share
    "sequencer.records",  # the one measurement and step-result records (stdlib only), likewise shared
}

# package -> project modules (prefixes) it may import, besides itself and the leaves.
ALLOWED = {
    "analysis": set(),
    "procedure": set(),
    "store": set(),
    "engine": {"sequencer.procedure", "sequencer.analysis", "drivers", "sequencer"},
    "reports": {"sequencer.store", "sequencer.analysis", "sequencer"},
    "results": {"sequencer.store", "sequencer.reports", "sequencer"},
    "web": {"sequencer.store", "sequencer.reports", "sequencer.results", "sequencer.procedure", "sequencer"},
}
FORBIDDEN = {
    "engine": {"sequencer.store", "sequencer.reports", "sequencer.cli", "sequencer.compose"},
    "reports": {"sequencer.engine", "drivers", "sequencer.cli", "sequencer.compose"},
    "results": {"sequencer.engine", "drivers", "sequencer.cli", "sequencer.compose", "sequencer.web"},
    "web": {"sequencer.engine", "drivers", "sequencer.cli", "sequencer.compose"},
}


def project_imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module == "sequencer":
                names.update(f"sequencer.{a.name}" for a in node.names)
            else:
                names.add(node.module)
    return {n for n in names if n.split(".")[0] in ("sequencer", "drivers")}


def _within(name: str, prefixes: set[str]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


@pytest.mark.parametrize("package", sorted(ALLOWED))
def test_imports_point_down(package: str) -> None:
    own = f"sequencer.{package}"
    offenders = []
    for path in sorted((SEQUENCER / package).rglob("*.py")):
        for name in project_imports(path):
            if name in LEAVES or _within(name, {own}) or name == "sequencer":
                continue
            if _within(name, FORBIDDEN.get(package, set())) or not _within(name, ALLOWED[package]):
                offenders.append(f"{path.relative_to(SEQUENCER)} imports {name}")
    assert offenders == []


def test_shared_records_need_only_the_standard_library() -> None:
    """``sequencer.records`` is shared by the light read path, which must not pay for numpy or
    SQLAlchemy: importing it in a fresh interpreter loads neither (nor the numpy trace module)."""
    probe = ("import sys, sequencer.records; "
             "print(sorted(m for m in ('numpy', 'sqlalchemy', 'drivers.trace') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True,
                         cwd=SEQUENCER.parent, timeout=120)  # a deadline, not a speed assertion
    assert out.stdout.strip() == "[]"
