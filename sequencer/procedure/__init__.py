"""Procedures: YAML files -> validated model -> expanded plan (reads files, nothing else).

Public API::

    load_procedure(path, *, lab_dir=None) -> Procedure
    load_procedure_text(text, path, files=None) -> Procedure
    validate_paths(paths, *, fragment=False, board_type=None, lab_dir=None) -> list[Problem]
    check_fragment(path, board_type=None) -> list[Problem]   (a file for include:, on its own)
    build_plan(procedure, board, *, overrides=None) -> Plan
    format_plan(plan) -> str
    procedure_schema() -> dict ; fragment_schema() -> dict
    load_board_type(name_or_path) -> BoardInfo ; board_info(board_type, serial) -> BoardInfo
    load_limits(path) -> tuple[Limit, ...]
    load_batch(path) -> Batch
    parse_quantity(text, dimension) -> float

The names are resolved lazily (module ``__getattr__``, PEP 562): importing one module of the
package -- ``sequencer.procedure.limits``, which ``verify`` needs to read a stored limit set --
does not import the loader, the expander and the JSON schemas with it.
"""

from __future__ import annotations

import importlib
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from drivers.errors import Problem
from sequencer.errors import ProcedureError

if TYPE_CHECKING:  # what the lazy names are, for type checkers and editors
    from .batch import Batch, BatchBoard, load_batch
    from .boards import board_info, board_type_input, board_type_of_input, load_board_type
    from .coverage import unjudged_warnings
    from .expand import build_plan
    from .formatting import format_plan
    from .fragments import check_fragment, is_fragment_text
    from .limits import QUANTITY_UNITS, load_limits
    from .loader import load_procedure, load_procedure_text
    from .model import Procedure
    from .plan_model import BoardInfo, Limit, Plan, PlannedStep, ProcedureMeta
    from .schema import fragment_schema, procedure_schema, schema_text
    from .units import Quantity, UnitError, parse_quantity

#: public name -> the module of this package that defines it
_LAZY: dict[str, str] = {
    **dict.fromkeys(("Batch", "BatchBoard", "load_batch"), "batch"),
    **dict.fromkeys(("board_info", "board_type_input", "board_type_of_input", "load_board_type"), "boards"),
    "unjudged_warnings": "coverage",
    "build_plan": "expand",
    "format_plan": "formatting",
    **dict.fromkeys(("check_fragment", "is_fragment_text"), "fragments"),
    **dict.fromkeys(("QUANTITY_UNITS", "load_limits"), "limits"),
    **dict.fromkeys(("load_procedure", "load_procedure_text"), "loader"),
    "Procedure": "model",
    **dict.fromkeys(("BoardInfo", "Limit", "Plan", "PlannedStep", "ProcedureMeta"), "plan_model"),
    **dict.fromkeys(("fragment_schema", "procedure_schema", "schema_text"), "schema"),
    **dict.fromkeys(("Quantity", "UnitError", "parse_quantity"), "units"),
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY})


VALIDATION_SERIAL = "VALIDATION"


def validate_paths(
    paths: Iterable[str | Path],
    *,
    fragment: bool = False,
    board_type: str | None = None,
    lab_dir: Path | None = None,
) -> list[Problem]:
    """Every problem of every procedure file: loading, then a plan for its board type.

    A file whose modeline names the fragment schema (or every file, with ``fragment``) is checked as a
    fragment (:func:`check_fragment`), planned for ``board_type`` when one is given.  ``lab_dir``: a
    lab's own folder, whose board types and limit sets are found before the shipped ones.
    """
    from .board_choice import LabFiles
    from .boards import board_info
    from .expand import build_plan
    from .fragments import check_fragment
    from .loader import load_procedure

    lab = LabFiles(folder=lab_dir)
    problems: list[Problem] = []
    for path in paths:
        if fragment or _marked_fragment(path):
            problems.extend(check_fragment(path, board_type))
            continue
        try:
            procedure = load_procedure(path, lab_dir=lab_dir)
        except ProcedureError as exc:
            problems.extend(_fragment_hint(path, exc.problems))
            continue
        try:
            board = board_info(lab.find("boards", procedure.board_type), VALIDATION_SERIAL)
        except ProcedureError as exc:
            problems.append(
                Problem(
                    procedure.board_type_location or procedure.location,
                    f"board_type {procedure.board_type!r}: {exc.problems[0].message}",
                )
            )
            continue
        try:
            build_plan(procedure, board)
        except ProcedureError as exc:
            problems.extend(exc.problems)
    return problems


FRAGMENT_HINT = (
    ", e.g. 'board_type: PA8'; if this is a file of steps for include: (a fragment), start it with "
    "'# yaml-language-server: $schema=<path to>/fragment.schema.json' or validate it with --fragment"
)


def _fragment_hint(path: str | Path, problems: Sequence[Problem]) -> list[Problem]:
    """``problems`` of a file that looks like a fragment (only a fragment's keys, no board type)
    with the missing-board_type problem saying how to check it as one."""
    from drivers.yamlsafe import YamlMap, load_yaml, read_bounded

    from .loader import FRAGMENT_KEYS

    missing = [p for p in problems if p.message == "a procedure needs 'board_type'"]
    if not missing:
        return list(problems)
    try:
        data = load_yaml(read_bounded(path), str(path), error=ProcedureError)
    except (OSError, ProcedureError):
        return list(problems)
    if not isinstance(data, YamlMap) or not set(data) <= set(FRAGMENT_KEYS):
        return list(problems)
    return [
        Problem(p.location, p.message + FRAGMENT_HINT) if p in missing else p for p in problems
    ]


def _marked_fragment(path: str | Path) -> bool:
    """Whether the file says (in its modeline) it is a fragment; unreadable files are left to the loader."""
    from .fragments import is_fragment_text

    try:
        with open(path, "rb") as handle:
            first = handle.readline(4096).decode("utf-8", "replace")
    except OSError:
        return False
    return is_fragment_text(first)


__all__ = [
    "QUANTITY_UNITS",
    "Batch",
    "BatchBoard",
    "BoardInfo",
    "Limit",
    "Plan",
    "PlannedStep",
    "Procedure",
    "ProcedureMeta",
    "Quantity",
    "UnitError",
    "board_info",
    "board_type_input",
    "board_type_of_input",
    "build_plan",
    "check_fragment",
    "format_plan",
    "fragment_schema",
    "is_fragment_text",
    "load_batch",
    "load_board_type",
    "load_limits",
    "load_procedure",
    "load_procedure_text",
    "parse_quantity",
    "procedure_schema",
    "schema_text",
    "unjudged_warnings",
    "validate_paths",
]
