"""The board type of a run, chosen per run (batch file, ``--board-type``), and a lab's own files.

A procedure names a default ``board_type`` and may list the types it accepts (``board_types:``).
The run's board type decides the board (channels, outputs, nominal gains, polarities) and, when the
procedure names its limits by board type (``limits: PA8``), the limit set: the run's type's limits,
with the procedure's inline ``set:`` on top.

A lab keeps its own board types and limit sets in a folder of its own, named once: in the bench
file (``lab: DIR``, relative to the bench file's folder) or in the environment variable
``BENCHWRIGHT_LAB`` (both read by the command line and passed down).  Files in
``<folder>/boards/<type>.yaml`` and ``<folder>/limits/<type>.yaml`` are found before the shipped
ones of the same name.

Precedence: ``BENCHWRIGHT_LAB`` when set, else the bench file's ``lab:``, else the shipped files
only.  The environment wins as it does over any file setting: one shell can try another folder
without editing the bench file (the command line warns that it shadows the bench file's).  Either
way the run stores the board-type and limit texts it used, so the choice is never lost.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from drivers.errors import Location, Problem
from drivers.yamlsafe import read_bounded
from sequencer.errors import ProcedureError
from sequencer.inputs import LIMITS_PREFIX, RunInput, loader_files, of_kind

from .boards import board_info, board_type_input, board_type_of_input, board_type_path, shipped_dir
from .checking import suggest
from .limits import merge_limits, parse_limits_text
from .model import Procedure
from .plan_model import BoardInfo

LAB_ENV = "BENCHWRIGHT_LAB"


@dataclass(frozen=True, kw_only=True)
class LabFiles:
    """Where a lab keeps its own board types and limit sets (None: only the shipped ones)."""

    folder: Path | None = None
    origin: str = ""  # who named it: LAB_ENV or "bench file <path>"; "" when none
    #: the bench file's folder when the environment named another one (for a warning)
    shadowed: Path | None = None

    @classmethod
    def from_env(cls, env: Mapping[str, str]) -> LabFiles:
        value = env.get(LAB_ENV, "").strip()
        return cls(folder=Path(value), origin=LAB_ENV) if value else cls()

    @classmethod
    def named(cls, env: Mapping[str, str], bench_lab: Path | None, bench_source: str = "") -> LabFiles:
        """The lab folder of a run (module docstring): ``BENCHWRIGHT_LAB`` when set, else the
        bench file's ``lab:`` (``bench_lab``, already resolved), else none."""
        from_env = cls.from_env(env)
        if from_env.folder is None:
            if bench_lab is None:
                return cls()
            return cls(folder=bench_lab, origin=f"bench file {bench_source}".strip())
        if bench_lab is not None and bench_lab.resolve() != from_env.folder.resolve():
            return dataclasses.replace(from_env, shadowed=bench_lab)
        return from_env

    def warning(self) -> str:
        """What the command line says when the environment shadows the bench file's folder."""
        if self.shadowed is None:
            return ""
        return (f"{LAB_ENV}={self.folder} is used; the bench file's lab: {self.shadowed} is not "
                f"(the environment wins; unset {LAB_ENV} to use the bench file's)")

    def find(self, kind: str, name: str) -> Path:
        """``<lab>/<kind>/<name>.yaml`` when it exists, else the shipped file (``kind``: boards,
        limits).  A name that is a path is taken as it is."""
        if name.endswith((".yaml", ".yml")) or "/" in name or "\\" in name:
            return Path(name)
        if self.folder is not None:
            own = self.folder / kind / f"{name}.yaml"
            if own.is_file():
                return own
        return board_type_path(name) if kind == "boards" else shipped_dir(kind) / f"{name}.yaml"


def choose_board(
    procedure: Procedure,
    serial: str,
    board_type: str | None = None,
    lab: LabFiles | None = None,
    *,
    stored: Sequence[RunInput] = (),
) -> tuple[Procedure, BoardInfo, RunInput]:
    """The procedure (its limits those of the run's board type), the board under test and the
    board-type text as a run input.  ``stored``: the inputs of a recorded run, whose board-type
    and limit-set texts are used instead of today's files."""
    lab = lab or LabFiles()
    where = procedure.board_type_location or procedure.location
    kept = of_kind(stored, "board_type")
    if kept:
        board_in = kept[0]
        template = board_type_of_input(board_in)
    else:
        name = board_type or procedure.board_type
        if not name:
            raise ProcedureError([Problem(where, "the procedure names no board_type; cannot plan")])
        _check_accepted(procedure, name, where)
        path = lab.find("boards", name)
        given_as_path = name.endswith((".yaml", ".yml")) or "/" in name or "\\" in name
        if not given_as_path and not path.is_file():
            raise ProcedureError([Problem(where, _unknown_type(name, lab))])
        board_in = RunInput("board_type", name, board_type_input(path).text)
        template = board_type_of_input(board_in, file=str(path))
    board = board_info(template, serial)
    _check_accepted(procedure, board.board_type, where)
    if procedure.limits_by_type and procedure.limits_by_type != board.board_type:
        procedure = _limits_of_type(procedure, board.board_type, lab, stored)
    return procedure, board, board_in


def _unknown_type(name: str, lab: LabFiles) -> str:
    """``board type 'PA9' is not known (did you mean 'PA8'?); known: ...``."""
    folders = [shipped_dir("boards")] + ([lab.folder / "boards"] if lab.folder is not None else [])
    known = sorted({p.stem for folder in folders if folder.is_dir() for p in folder.glob("*.yaml")})
    where = (
        f" or the lab's {lab.folder / 'boards'}" if lab.folder is not None
        else f", or a lab's own folder named by 'lab: DIR' in the bench file or {LAB_ENV}"
    )
    return (
        f"board type {name!r} is not known{suggest(name, known)}; known: {', '.join(known)} "
        f"(a board-type file in procedures/boards/{where})"
    )


def _check_accepted(procedure: Procedure, name: str, where: Location) -> None:
    if procedure.board_types and name not in procedure.board_types:
        accepted = ", ".join(procedure.board_types)
        raise ProcedureError(
            [Problem(where, f"board type {name!r} is not one this procedure accepts ({accepted})")]
        )


def _limits_of_type(
    procedure: Procedure, name: str, lab: LabFiles, stored: Sequence[RunInput]
) -> Procedure:
    """``procedure`` judged by the limit set of board type ``name`` (its inline ``set:`` on top);
    the set's text joins the procedure's files, so the run stores it with its other inputs.  A
    board type without a limit set of its own (none in the lab's folder or shipped, e.g. a cut-down
    test type) is judged by the procedure's limits as they are."""
    key = f"{LIMITS_PREFIX}{name}.yaml"
    text = loader_files(stored).get(key)
    file = f"<limit set {name} as stored>"
    if text is None:
        path = lab.find("limits", name)
        if not path.is_file():
            return procedure
        file = str(path)
        try:
            text = read_bounded(path).decode("utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise ProcedureError(
                [
                    Problem(
                        Location(file, 1, 1),
                        f"cannot read the limit set of board type {name}: {exc}",
                    )
                ]
            ) from None
    limits = merge_limits(parse_limits_text(text, file), procedure.limits_inline)
    return dataclasses.replace(
        procedure,
        limits=limits,
        limits_by_type=name,
        files={**procedure.files, key: text},
        limits_files=tuple(sorted({*procedure.limits_files, key})),
    )
