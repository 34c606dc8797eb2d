"""Procedures: YAML files -> validated model -> expanded plan (reads files, nothing else).

Public API::

    load_procedure(path) -> Procedure
    load_procedure_text(text, path, files=None) -> Procedure
    validate_paths(paths) -> list[Problem]
    build_plan(procedure, board, *, overrides=None) -> Plan
    format_plan(plan) -> str
    procedure_schema() -> dict
    load_board_type(name_or_path) -> BoardInfo ; board_info(board_type, serial) -> BoardInfo
    load_limits(path) -> tuple[Limit, ...]
    load_batch(path) -> Batch
    parse_quantity(text, dimension) -> float
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from drivers.errors import Problem
from sequencer.errors import ProcedureError

from .batch import Batch, BatchBoard, load_batch
from .boards import board_info, board_type_input, board_type_of_input, load_board_type
from .coverage import unjudged_warnings
from .expand import build_plan
from .formatting import format_plan
from .limits import QUANTITY_UNITS, load_limits
from .loader import load_procedure, load_procedure_text
from .model import Procedure
from .plan_model import BoardInfo, Limit, Plan, PlannedStep, ProcedureMeta
from .schema import procedure_schema, schema_text
from .units import Quantity, UnitError, parse_quantity

VALIDATION_SERIAL = "VALIDATION"


def validate_paths(paths: Iterable[str | Path]) -> list[Problem]:
    """Every problem of every procedure file: loading, then a plan for its board type."""
    problems: list[Problem] = []
    for path in paths:
        try:
            procedure = load_procedure(path)
        except ProcedureError as exc:
            problems.extend(exc.problems)
            continue
        try:
            board = board_info(procedure.board_type, VALIDATION_SERIAL)
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
    "format_plan",
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
