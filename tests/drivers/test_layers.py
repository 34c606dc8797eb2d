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


# The simulator's VXI-11 *server* borrows pyvisa-py's ONC RPC / XDR codec (the wire coding, not a VISA
# session): that is the one import of pyvisa_py allowed outside the transport, and only that module of it.
WIRE_CODEC = "pyvisa_py.protocols"


def test_only_the_transport_imports_pyvisa():
    importers = sorted(
        str(p.relative_to(DRIVERS))
        for p in DRIVERS.rglob("*.py")
        if any(
            m.split(".")[0] in ("pyvisa", "pyvisa_py") and m != WIRE_CODEC
            for m in imported_modules(p)
        )
    )
    assert importers == ["transport.py"]


def test_only_the_simulated_vxi11_server_borrows_the_rpc_codec():
    borrowers = sorted(
        str(p.relative_to(DRIVERS)) for p in DRIVERS.rglob("*.py") if WIRE_CODEC in imported_modules(p)
    )
    assert borrowers == ["sim/vxi11.py"]
