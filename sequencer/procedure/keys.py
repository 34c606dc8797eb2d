"""Key checks of a YAML mapping, with a close match offered for a misspelt key.

Why a module of its own: ``limits`` needs only these, and ``checking`` imports the expression
language with them; ``verify`` reads a stored limit set and should not import what it never uses.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from drivers.errors import Problem
from drivers.yamlsafe import YamlMap


def suggest(word: Any, options: Iterable[str]) -> str:
    """`` (did you mean 'x'?)`` when ``word`` is close to one of ``options``, else ``""``."""
    import difflib  # only when there is a word to match: a text without mistakes never needs it

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
