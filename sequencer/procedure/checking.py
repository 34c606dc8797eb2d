"""Small checks shared by the loaders: unknown keys with a "did you mean" hint, names, name scopes."""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterable
from typing import Any

from drivers.errors import Location, Problem
from drivers.yamlsafe import YamlMap

from .expressions import FUNCTIONS, KEYWORDS, Attr, Name
from .values import Template, references

IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
SEGMENT = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.=+-]*$")
BOARD_FIELDS = ("serial", "type", "channels", "outputs", "nominal_gain", "polarity")
RESERVED = frozenset({"board", "channel", "output", *FUNCTIONS, *KEYWORDS})


def suggest(word: Any, options: Iterable[str]) -> str:
    """`` (did you mean 'x'?)`` when ``word`` is close to one of ``options``, else ``""``."""
    close = difflib.get_close_matches(str(word), list(options), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def check_keys(
    mapping: YamlMap, allowed: Iterable[str], problems: list[Problem], what: str
) -> None:
    """Every key of ``mapping`` must be in ``allowed``; unknown ones are located at the key."""
    allowed = tuple(allowed)
    for key in mapping:
        if key not in allowed:
            problems.append(
                Problem(
                    mapping.where(key, of_key=True),
                    f"unknown key {key!r} in {what}{suggest(key, allowed)}",
                )
            )


def require_keys(
    mapping: YamlMap, required: Iterable[str], problems: list[Problem], what: str
) -> None:
    """Every key of ``required`` must be present (reported at the mapping)."""
    for key in required:
        if key not in mapping:
            problems.append(Problem(mapping.where(), f"{what} needs {key!r}"))


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
