"""Physical quantities written in procedures: ``40 mV``, ``0.2 V``, ``1 kHz``, ``50 ns``, ``5 V/s``.

A :class:`Quantity` keeps its value in SI base units (V, s, Hz, V/s, A, %) with the unit it was written
in (for readable step paths such as ``amp=40mV``).  It becomes a plain number only where it meets a step
argument, in the canonical unit of that argument's dimension (``kinds.CANONICAL_UNIT``): a signal
voltage in mV, a bias voltage in V, a pulse time in ns, a duration in s.

Sweep variables are stored in ``PlannedStep.labels`` as numbers in the fixed :data:`LABEL_UNIT` of their
physical dimension (voltages mV, times ns, frequencies Hz, slew V/s, currents uA, percent %), so that an
analysis reading ``labels["amp"]`` always gets millivolts whatever unit the procedure was written in.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

#: SI prefixes accepted before a unit (``u`` and both Greek mu spellings mean micro).
PREFIXES: dict[str, float] = {
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "µ": 1e-6,
    "μ": 1e-6,
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "M": 1e6,
    "G": 1e9,
}

#: Base unit as written -> physical dimension.  ``S/s`` (samples per second) is a frequency.
BASE_UNITS: dict[str, str] = {"V/s": "V/s", "S/s": "Hz", "Hz": "Hz", "V": "V", "s": "s", "A": "A"}

#: kinds.Dimension -> (physical dimension, factor from SI to the canonical unit)
DIMENSIONS: dict[str, tuple[str, float]] = {
    "voltage": ("V", 1e3),
    "bias_voltage": ("V", 1.0),
    "time": ("s", 1e9),
    "duration": ("s", 1.0),
    "frequency": ("Hz", 1.0),
    "slew": ("V/s", 1.0),
    "current": ("A", 1e6),
    "percent": ("%", 1.0),
}

#: physical dimension -> (label unit, factor from SI)
LABEL_UNIT: dict[str, tuple[str, float]] = {
    "V": ("mV", 1e3),
    "s": ("ns", 1e9),
    "Hz": ("Hz", 1.0),
    "V/s": ("V/s", 1.0),
    "A": ("uA", 1e6),
    "%": ("%", 1.0),
}

_PREFIX_RE = "|".join(re.escape(p) for p in PREFIXES if p)
UNIT_PATTERN = rf"(?:%|(?:{_PREFIX_RE})?(?:V/s|S/s|Hz|V|s|A))"
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*({_NUMBER})\s*({UNIT_PATTERN})?\s*$")
_UNIT_RE = re.compile(rf"^(?P<prefix>{_PREFIX_RE})?(?P<base>V/s|S/s|Hz|V|s|A)$")


class UnitError(ValueError):
    """A value cannot be read or converted in the dimension asked for."""


@dataclass(frozen=True)
class Quantity:
    """A value with a physical dimension: ``si`` in SI base units, ``unit`` as written."""

    si: float
    dimension: str  # "V", "s", "Hz", "V/s", "A", "%"
    unit: str  # e.g. "mV"

    def written(self) -> float:
        """The value in the unit it was written in."""
        return clean(self.si / unit_factor(self.unit))

    def __str__(self) -> str:
        return f"{format_number(self.written())} {self.unit}"

    def compact(self) -> str:
        """``40mV``: for step paths."""
        return f"{format_number(self.written())}{self.unit}"


def unit_factor(unit: str) -> float:
    """SI value of one ``unit`` (``mV`` -> 1e-3)."""
    if unit == "%":
        return 1.0
    match = _UNIT_RE.match(unit)
    if match is None:
        raise UnitError(f"unknown unit {unit!r}")
    return PREFIXES[match["prefix"] or ""]


def unit_dimension(unit: str) -> str:
    """Physical dimension of ``unit`` (``mV`` -> ``V``)."""
    if unit == "%":
        return "%"
    match = _UNIT_RE.match(unit)
    if match is None:
        raise UnitError(f"unknown unit {unit!r}")
    return BASE_UNITS[match["base"]]


def make_quantity(number: float, unit: str) -> Quantity:
    """``number`` ``unit`` as a :class:`Quantity`."""
    return Quantity(si=clean(number * unit_factor(unit)), dimension=unit_dimension(unit), unit=unit)


def read_quantity(text: str) -> Quantity | float | None:
    """``"40 mV"`` -> Quantity, ``"40"`` -> 40.0, anything else -> None."""
    match = _QUANTITY_RE.match(text)
    if match is None:
        return None
    number = float(match[1])
    if not math.isfinite(number):
        return None
    return make_quantity(number, match[2]) if match[2] else number


def to_canonical(value: Quantity | float | int, dimension: str) -> float:
    """``value`` in the canonical unit of ``dimension`` (a bare number is taken as canonical)."""
    physical, factor = DIMENSIONS[dimension]
    if isinstance(value, Quantity):
        if value.dimension != physical:
            raise UnitError(
                f"{value} is a {value.dimension} value, {dimension} needs {canonical_unit(dimension)}"
            )
        return clean(value.si * factor)
    return float(value)


def canonical_unit(dimension: str) -> str:
    """Canonical unit of a kinds.Dimension (``voltage`` -> ``mV``)."""
    physical, factor = DIMENSIONS[dimension]
    if physical == "%":
        return "%"
    prefix = next(p for p, f in PREFIXES.items() if math.isclose(f, 1.0 / factor) and p != "μ")
    return prefix + physical


def parse_quantity(text: str, dimension: str) -> float:
    """Read ``text`` (``"40 mV"``, ``"1 kHz"``, ``"5"``) as a number in ``dimension``'s canonical unit."""
    if dimension not in DIMENSIONS:
        raise UnitError(f"{dimension!r} is not a dimension with units")
    value = read_quantity(text)
    if value is None:
        raise UnitError(f"{text!r} is not a number with a unit (e.g. '40 mV')")
    return to_canonical(value, dimension)


def label_value(value: Quantity) -> float:
    """A quantity as the number stored in step labels (:data:`LABEL_UNIT`)."""
    return clean(value.si * LABEL_UNIT[value.dimension][1])


def clean(x: float) -> float:
    """Round to 12 significant digits: 0.020000000000000004 -> 0.02 (deterministic labels)."""
    if x == 0 or not math.isfinite(x):
        return float(x)
    return float(f"{x:.12g}")


def format_number(x: float | int) -> str:
    """Short, stable text of a number: 40, 32.5, 0.001, 1e+06."""
    if isinstance(x, bool):
        return str(x).lower()
    if isinstance(x, int):
        return str(x)
    return f"{x:.6g}"
