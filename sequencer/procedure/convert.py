"""Conversion of a resolved value to what a step argument needs (``kinds.Arg.dimension``).

Quantities become numbers in the canonical unit of the dimension; a bare number is taken in that unit;
``int`` arguments take whole numbers only; ``name`` arguments take identifiers (trace and value names).
"""

from __future__ import annotations

import math
import re
from typing import Any

from .evaluate import describe, is_number
from .kinds import Arg
from .units import DIMENSIONS, Quantity, UnitError, canonical_unit, read_quantity, to_canonical

NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_.-]*$")


class ConversionError(ValueError):
    """The value does not fit the argument."""


def convert_arg(value: Any, arg: Arg) -> Any:
    """``value`` converted for ``arg``; :class:`ConversionError` with a message otherwise."""
    converted = _convert(value, arg.dimension, arg.name)
    if arg.choices and converted not in arg.choices:
        raise ConversionError(f"{arg.name}: {converted!r} is not one of {', '.join(arg.choices)}")
    return converted


def _convert(value: Any, dimension: str, name: str) -> Any:
    if dimension in DIMENSIONS:
        return _quantity(value, dimension, name)
    handler = _HANDLERS[dimension]
    return handler(value, name)


def _quantity(value: Any, dimension: str, name: str) -> float:
    if isinstance(value, str):
        read = read_quantity(value)
        if read is None:
            raise ConversionError(
                f"{name}: {value!r} is not a number with a unit (e.g. 10 {canonical_unit(dimension)})"
            )
        value = read
    if not (is_number(value) or isinstance(value, Quantity)):
        raise ConversionError(
            f"{name}: needs a value in {canonical_unit(dimension)}, got {describe(value)}"
        )
    try:
        number = to_canonical(value, dimension)
    except UnitError as exc:
        raise ConversionError(f"{name}: {exc}") from None
    if not math.isfinite(number):
        raise ConversionError(f"{name}: not a finite number")
    return number


def _int(value: Any, name: str) -> int:
    if is_number(value) and math.isfinite(value) and int(value) == value:
        return int(value)
    raise ConversionError(f"{name}: needs a whole number, got {describe(value)}")


def _float(value: Any, name: str) -> float:
    if is_number(value) and math.isfinite(value):
        return float(value)
    raise ConversionError(f"{name}: needs a plain number, got {describe(value)}")


def _bool(value: Any, name: str) -> bool:
    if isinstance(value, bool):
        return value
    raise ConversionError(f"{name}: needs true or false, got {describe(value)}")


def _str(value: Any, name: str) -> str:
    if isinstance(value, str):
        return value
    if is_number(value) and isinstance(value, int):
        return str(value)
    raise ConversionError(f"{name}: needs a text, got {describe(value)}")


def _name(value: Any, name: str) -> str:
    if isinstance(value, str) and NAME_RE.match(value):
        return value
    raise ConversionError(
        f"{name}: needs a name (letters, digits, '_', '.', '-'), got {describe(value)}"
    )


def _names(value: Any, name: str) -> tuple[str, ...]:
    items = value if isinstance(value, list | tuple) else [value]
    return tuple(_name(v, name) for v in items)


def _ints(value: Any, name: str) -> tuple[int, ...]:
    items = value if isinstance(value, list | tuple) else [value]
    return tuple(_int(v, name) for v in items)


_HANDLERS = {
    "int": _int,
    "float": _float,
    "bool": _bool,
    "str": _str,
    "name": _name,
    "names": _names,
    "ints": _ints,
}
