"""What every store and the SCPI wire accept of a text: checked at load, so a run never fails late.

The column sizes are those of ``sequencer/store/models.py`` (PostgreSQL refuses a longer value where
SQLite would keep it); a control character in an SCPI argument would end or split the command on
the wire (IEEE 488.2 terminates a program message at a newline); a lone surrogate is not Unicode
text and no UTF-8 encoder (file, database, socket) accepts it.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from drivers.errors import Problem

from .expressions import MAX_TEXT
from .kinds import KINDS
from .model import Leaf

#: Column sizes of the store (sequencer/store/models.py): runs.procedure, runs.board, ...
MAX_NAME = 200
MAX_VERSION = 100
MAX_PATH = 500
MAX_OUTPUT = 50

_ALLOWED_IN_LINES = frozenset("\n\t")


def text_problem(value: str, what: str, *, max_length: int, lines: bool = False) -> str | None:
    """Why ``value`` cannot be kept as ``what``, or ``None`` when it can.

    ``lines``: a free text (a description, an operator message) that may hold newlines and tabs;
    otherwise every control character is refused.
    """
    if len(value) > max_length:
        return f"{what} is {len(value)} characters long, above the {max_length} the results database keeps"
    for index, char in enumerate(value):
        code = ord(char)
        if 0xD800 <= code < 0xE000:
            return f"{what} holds a lone surrogate {char!r} at character {index + 1} (not Unicode text)"
        if (code < 0x20 or 0x7F <= code < 0xA0) and not (lines and char in _ALLOWED_IN_LINES):
            return f"{what} holds the control character {char!r} at character {index + 1}" + (
                "" if lines else " (one line of printable text is expected)"
            )
    return None


def step_texts_fit(step: Leaf, args: Mapping[str, Any], path: str, problems: list[Problem]) -> bool:
    """The resolved texts of one planned step fit the store and the wire; each problem located.

    An instrument step's texts are single short lines (they go into SCPI commands and names of
    stored traces); an operator message may have lines; the step's path fits its column.
    """
    wire = KINDS[step.kind].role is not None
    before = len(problems)
    for name, value in args.items():
        for text in value if isinstance(value, list | tuple) else (value,):
            if not isinstance(text, str):
                continue
            problem = text_problem(
                text,
                f"{step.kind}: {name}",
                max_length=MAX_NAME if wire else MAX_TEXT,
                lines=not wire,
            )
            if problem is not None:
                template = step.args.get(name)
                problems.append(
                    Problem(template.location if template is not None else step.location, problem)
                )
                break
    if len(path) > MAX_PATH:
        problems.append(
            Problem(
                step.location,
                f"step path is {len(path)} characters long, above the {MAX_PATH} the results "
                f"database keeps ({path[:60]}...)",
            )
        )
    return len(problems) == before
