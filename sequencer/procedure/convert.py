"""Conversion of a resolved value to what a step argument needs (``kinds.Arg.dimension``).

Quantities become numbers in the canonical unit of the dimension; a bare number (other than 0, the
same in every unit) is refused with what to write instead ("write 20 ms or 20 s"), because a bare
number would mean a different unit per argument (mV for a pulse, s for a wait);
``int`` arguments take whole numbers only; ``name`` arguments take identifiers (trace and value names).
"""

from __future__ import annotations

import math
import re
from typing import Any

from .evaluate import describe, is_number
from .kinds import Arg
from .units import (
    DIMENSIONS,
    Quantity,
    UnitError,
    canonical_unit,
    format_number,
    read_quantity,
    to_canonical,
)

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
    if not isinstance(value, Quantity) and value != 0:
        raise ConversionError(f"{name}: {format_number(value)} has no unit: {unit_hint(value, dimension)}")
    try:
        number = to_canonical(value, dimension)
    except UnitError as exc:
        raise ConversionError(f"{name}: {exc}") from None
    if not math.isfinite(number):
        raise ConversionError(f"{name}: not a finite number")
    return number


#: two units a value of each dimension is commonly written in, for "write 20 ms or 20 s"
_HINT_UNITS: dict[str, tuple[str, ...]] = {
    "voltage": ("mV", "V"),
    "bias_voltage": ("V", "mV"),
    "time": ("ns", "us"),
    "duration": ("ms", "s"),
    "frequency": ("Hz", "kHz"),
    "slew": ("V/s",),
    "current": ("uA", "nA"),
    "percent": ("%",),
}


def unit_hint(value: float | int, dimension: str) -> str:
    """``write 20 ms or 20 s``: what to write instead of a bare number of ``dimension``."""
    number = format_number(value)
    return "write " + " or ".join(f"{number} {u}" for u in _HINT_UNITS[dimension])


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
