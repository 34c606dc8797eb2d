"""Batch files: the boards of one batch to qualify in turn with one procedure.

::

    batch: NR-2025-W27                 # batch name
    procedure: ../procedures/qualify-pa8.yaml   # relative to this file
    board_type: PA8                    # default for every board
    operator: A. Example               # default for every board (none: the login name)
    parameters: {points: 6}            # optional: procedure parameters for every board
    boards:
      - serial: NR-PA8-0001
        sim_board: sim/NR-PA8-0001.yaml          # optional: simulated board file (relative)
      - {serial: NR-PA8-0002, operator: B. Example}
      - serial: NR-DGZ4-0003                     # a module of another type in the same batch:
        board_type: DGZ4                         # its own procedure (relative to this file) and
        procedure: ../procedures/digitizer.yaml  # its own parameters (the batch's are for the
        parameters: {hist_points: 200000}        # batch's procedure; a board's own win over them)

Serials must be unique; paths are resolved relative to the batch file.  Parameters are the
procedure's own (``parameters:`` of the procedure file); a name the procedure does not have is
refused when the board's plan is built.  What a run used (the resolved parameters) is kept with it.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap, YamlSeq, load_yaml, read_bounded
from sequencer.errors import ProcedureError

from .checking import check_keys, require_keys
from .expressions import MAX_TEXT
from .textrules import MAX_NAME, text_problem

BATCH_KEYS = ("batch", "procedure", "board_type", "operator", "description", "parameters", "boards")
BOARD_KEYS = ("serial", "board_type", "operator", "sim_board", "procedure", "parameters")
SERIAL = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass(frozen=True, kw_only=True)
class BatchBoard:
    """One board of a batch."""

    serial: str
    board_type: str
    operator: str
    sim_board: str | None = None  # path of a simulated board file, resolved
    location: Location | None = None
    procedure: str | None = None  # this board's own procedure (path, resolved); None: the batch's
    parameters: Mapping[str, Any] = field(default_factory=dict)  # over the batch's parameters


@dataclass(frozen=True, kw_only=True)
class Batch:
    """A batch of boards and the procedure that qualifies them."""

    name: str
    procedure: str  # path, resolved relative to the batch file
    boards: tuple[BatchBoard, ...]
    description: str = ""
    source_path: str = ""
    parameters: Mapping[str, Any] = field(default_factory=dict)  # for every board's procedure

    def procedure_of(self, board: BatchBoard) -> str:
        """The procedure file that qualifies ``board``: its own, else the batch's."""
        return board.procedure or self.procedure

    def parameters_of(self, board: BatchBoard) -> dict[str, Any]:
        """The parameter overrides of ``board``'s plan: the batch's (unless the board has its own
        procedure, which the batch's parameters were not written for), then the board's own."""
        return {**({} if board.procedure else self.parameters), **board.parameters}


def _text(data: YamlMap, key: str, problems: list[Problem], default: str = "") -> str:
    value = data.get(key, default)
    if not isinstance(value, str) or (key in data and not value.strip()):
        problems.append(Problem(data.where(key), f"{key}: needs a non-empty text"))
        return default
    # a procedure is a file path (a text column); the others are names of the store's runs table
    problem = text_problem(value, key, max_length=MAX_TEXT if key == "procedure" else MAX_NAME)
    if problem is not None:
        problems.append(Problem(data.where(key), problem))
        return default
    return value


def _board(
    entry: Any, at: Location, defaults: dict[str, str], base: Path, problems: list[Problem]
) -> BatchBoard | None:
    if not isinstance(entry, YamlMap):
        problems.append(Problem(at, "a board is a mapping such as {serial: NR-PA8-0001}"))
        return None
    before = len(problems)
    check_keys(entry, BOARD_KEYS, problems, "a batch board")
    require_keys(entry, ("serial",), problems, "a batch board")
    serial = entry.get("serial", "")
    if "serial" in entry and (
        not isinstance(serial, str) or not SERIAL.match(serial) or len(serial) > MAX_NAME
    ):
        problems.append(
            Problem(
                entry.where("serial"), f"serial {serial!r} must be letters, digits, '_', '.', '-'"
            )
        )
    values = {k: _text(entry, k, problems, defaults[k]) for k in ("board_type", "operator")}
    # no operator here or at the top: the batch command records the login name (as `run` does)
    if not values["board_type"]:
        problems.append(
            Problem(entry.where(), "board needs a board_type (here or at the top of the batch)")
        )
    procedure = _text(entry, "procedure", problems) if "procedure" in entry else None
    parameters = _parameters(entry, problems)
    sim = entry.get("sim_board")
    if sim is not None and (not isinstance(sim, str) or not sim.strip()):
        problems.append(
            Problem(entry.where("sim_board"), "sim_board: needs the path of a board file")
        )
    if len(problems) != before:
        return None
    return BatchBoard(
        serial=serial,
        sim_board=str(base / sim) if sim else None,
        location=at,
        procedure=str(base / procedure) if procedure else None,
        parameters=parameters,
        **values,
    )


def _parameters(data: YamlMap, problems: list[Problem]) -> dict[str, Any]:
    """``parameters:`` of a batch or a board: a mapping of names to values (texts, numbers, lists)."""
    raw = data.get("parameters")
    if raw is None:
        return {}
    if not isinstance(raw, YamlMap):
        problems.append(
            Problem(data.where("parameters"), "parameters: needs a mapping such as {points: 6}")
        )
        return {}
    out: dict[str, Any] = {}
    for key, value in raw.items():
        ok = isinstance(key, str) and _parameter_value(value)
        if not ok:
            problems.append(
                Problem(
                    raw.where(key),
                    f"parameters: {key!r} needs a text, a number or a list of them",
                )
            )
            continue
        out[key] = list(value) if isinstance(value, YamlSeq) else value
    return out


def _parameter_value(value: Any) -> bool:
    scalar = (str, int, float)
    if isinstance(value, bool):
        return False
    if isinstance(value, YamlSeq | list):
        return bool(value) and all(
            isinstance(v, scalar) and not isinstance(v, bool) for v in value
        )
    return isinstance(value, scalar)


def parse_batch_text(text: str | bytes, file: str) -> Batch:
    """A batch file's text as a :class:`Batch`; :class:`ProcedureError` with every problem located."""
    data = load_yaml(text, file, error=ProcedureError)
    if not isinstance(data, YamlMap):
        raise ProcedureError(
            [Problem(Location(file, 1, 1), "a batch file is a mapping with 'boards:'")]
        )
    problems: list[Problem] = []
    check_keys(data, BATCH_KEYS, problems, "a batch file")
    require_keys(data, ("batch", "procedure", "boards"), problems, "a batch file")
    base = Path(file).parent
    name = _text(data, "batch", problems)
    procedure = _text(data, "procedure", problems)
    defaults = {k: _text(data, k, problems) for k in ("board_type", "operator")}
    description = _text(data, "description", problems)
    parameters = _parameters(data, problems)
    boards: list[BatchBoard] = []
    raw = data.get("boards")
    if "boards" in data and (not isinstance(raw, YamlSeq) or not raw):
        problems.append(Problem(data.where("boards"), "boards: needs a list of boards"))
        raw = YamlSeq()
    seen: dict[str, int] = {}
    for i, entry in enumerate(raw or ()):
        board = _board(entry, raw.where(i), defaults, base, problems)
        if board is None:
            continue
        if board.serial in seen:
            problems.append(
                Problem(
                    raw.where(i),
                    f"serial {board.serial!r} listed twice (first at line {seen[board.serial]})",
                )
            )
            continue
        seen[board.serial] = raw.where(i).line
        boards.append(board)
    if problems:
        raise ProcedureError(problems)
    return Batch(
        name=name,
        procedure=str(base / procedure),
        boards=tuple(boards),
        description=description,
        source_path=file,
        parameters=parameters,
    )


def load_batch(path: str | Path) -> Batch:
    """The batch file at ``path``."""
    try:
        raw = read_bounded(path)
    except OSError as exc:
        raise ProcedureError(
            [Problem(Location(str(path), 1, 1), f"cannot read batch file: {exc.strerror}")]
        ) from None
    return parse_batch_text(raw, str(path))
