"""Small checks shared by the loaders: unknown keys with a "did you mean" hint, names, name scopes."""

from __future__ import annotations

import re
from typing import Any

from drivers.errors import Location, Problem

from .expressions import FUNCTIONS, KEYWORDS, Attr, Name
from .keys import check_keys as check_keys  # re-exported: moved to keys
from .keys import require_keys as require_keys
from .keys import suggest as suggest
from .values import Template, references

IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
SEGMENT = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.=+-]*$")
BOARD_FIELDS = ("serial", "type", "channels", "outputs", "nominal_gain", "polarity")
RESERVED = frozenset({"board", "channel", "output", *FUNCTIONS, *KEYWORDS})


def check_identifier(name: Any, location: Location, problems: list[Problem], what: str) -> bool:
    """``name`` must be an identifier that is not reserved."""
    if not isinstance(name, str) or not IDENTIFIER.match(name):
        problems.append(Problem(location, f"{what} {name!r} is not a name (letters, digits, '_')"))
        return False
    if name in RESERVED:
        problems.append(Problem(location, f"{what} {name!r} is a reserved word"))
        return False
    return True


def check_references(
    template: Template | None, scope: frozenset[str], problems: list[Problem]
) -> None:
    """Every name an expression reads must be in ``scope``; ``board.x`` must be a board field."""
    for expr, node in references(template):
        offset = node.offset + expr.start
        if isinstance(node, Name) and node.name not in scope:
            hint = suggest(node.name, scope)
            if node.name in ("channel", "output"):
                hint = f" (only inside for_{node.name}s)"
            problems.append(
                Problem(
                    expr.location,
                    f"unknown name {node.name!r} (at offset {offset} in {expr.text!r}){hint}",
                )
            )
        elif (
            isinstance(node, Attr)
            and isinstance(node.target, Name)
            and node.target.name == "board"
            and node.name not in BOARD_FIELDS
        ):
            problems.append(
                Problem(
                    expr.location,
                    f"board has no field {node.name!r} (at offset {offset} in {expr.text!r}){suggest(node.name, BOARD_FIELDS)}",
                )
            )
