"""Waveform calibration declared as data: preamble fields, references, data kinds, chunks.

A record of ``points`` codes calibrates as (the common form of scope waveform preambles)::

    volts[i] = (code[i] - y_reference) * y_increment + y_origin
    t[i]     = (i - x_reference) * x_increment + x_origin

A preamble without reference fields has ``x_reference = y_reference = 0`` (the generic dialect's
``volts = code * y_increment + y_origin``).  Codes arrive as binary elements (int8, uint8, int16,
uint16, int32, float32, float64, either byte order) or as ASCII numbers separated by commas.
Pure functions, no I/O: the scope driver and the tests use them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from drivers.scpi.blocks import numpy_dtype
from drivers.scpi.replies import parse_number, refuse_codes

#: Preamble values a dialect may declare (``points`` and ``averages`` are optional).
PREAMBLE_NAMES = (
    "x_increment", "x_origin", "x_reference", "y_increment", "y_origin", "y_reference",
    "points", "averages",
)  # fmt: skip
REQUIRED = ("x_increment", "y_increment")
DATA_KINDS = ("int8", "uint8", "int16", "uint16", "int32", "float32", "float64")
#: Largest record we assemble from chunks (points).
MAX_POINTS = 1 << 28


@dataclass(frozen=True, kw_only=True)
class Preamble:
    """The calibration of one record (x in seconds, y in volts)."""

    x_increment: float
    y_increment: float
    x_origin: float = 0.0
    x_reference: float = 0.0
    y_origin: float = 0.0
    y_reference: float = 0.0
    points: int | None = None
    averages: int = 1

    @property
    def t0_s(self) -> float:
        """Time of the first sample: ``(0 - x_reference) * x_increment + x_origin``."""
        return self.x_origin - self.x_reference * self.x_increment


def preamble_from(values: Mapping[str, float]) -> Preamble:
    """A checked :class:`Preamble` from named values; refuses what would give wrong volts."""
    for name in REQUIRED:
        if name not in values:
            raise ValueError(f"the preamble has no {name}")
    checked = {
        k: refuse_codes(float(v), f"preamble {k}") for k, v in values.items() if k in PREAMBLE_NAMES
    }
    if not checked["x_increment"] > 0:
        raise ValueError(f"preamble x_increment {checked['x_increment']!r} is not positive")
    if checked["y_increment"] == 0:
        raise ValueError("preamble y_increment is 0: every code would read the same voltage")
    points = checked.pop("points", None)
    averages = checked.pop("averages", 1.0)
    if points is not None and (not points.is_integer() or not 0 < points <= MAX_POINTS):
        raise ValueError(f"preamble points {points!r} is not a record length")
    return Preamble(
        **checked,
        points=None if points is None else int(points),
        averages=max(1, int(averages)),
    )


def preamble_by_position(fields: Sequence[str], positions: Mapping[str, int]) -> Preamble:
    """A preamble from one reply's fields; ``positions`` maps names to 1-based positions."""
    values: dict[str, float] = {}
    for name, position in positions.items():
        if position > len(fields):
            raise ValueError(f"the preamble has {len(fields)} fields; {name} is field {position}")
        values[name] = parse_number(fields[position - 1])
    return preamble_from(values)


@dataclass(frozen=True, kw_only=True)
class DataFormat:
    """How codes travel: an element kind in a byte order, or ASCII numbers."""

    kind: str = "int16"
    big_endian: bool = True
    ascii: bool = False
    separator: str = ","

    def __post_init__(self) -> None:
        if self.kind not in DATA_KINDS:
            raise ValueError(f"unknown data kind {self.kind!r}; one of {', '.join(DATA_KINDS)}")


def decode_codes(payload: bytes, fmt: DataFormat) -> np.ndarray:
    """Codes from a block's data bytes (binary, in the wire's byte order) or ASCII text."""
    if fmt.ascii:
        text = payload.decode("ascii", "strict").strip()
        if not text:
            return np.zeros(0)
        parts = [p for p in text.split(fmt.separator)]
        return np.array([refuse_codes(parse_number(p), "code") for p in parts], dtype=np.float64)
    dtype = numpy_dtype(fmt.kind, fmt.big_endian)
    if len(payload) % dtype.itemsize:
        raise ValueError(f"{len(payload)} bytes is not a whole number of {fmt.kind} elements")
    return np.frombuffer(payload, dtype=dtype)


def calibrate(codes: np.ndarray, preamble: Preamble) -> np.ndarray:
    """Volts from codes: ``(code - y_reference) * y_increment + y_origin`` (float64, native order)."""
    codes = np.asarray(codes)
    volts = codes.astype(np.float64)  # a new array, swapped from the wire if need be
    # integer codes are finite by construction; float and ASCII-parsed ones are looked at
    if codes.dtype.kind not in "iu" and not np.all(np.isfinite(volts)):
        raise ValueError("the record holds non-finite codes")
    if preamble.y_reference:
        volts -= preamble.y_reference
    volts *= preamble.y_increment
    volts += preamble.y_origin
    return volts


def chunk_ranges(points: int, max_points: int) -> list[tuple[int, int]]:
    """``(first, count)`` pairs (0-based) covering ``points`` in requests of at most ``max_points``."""
    if points < 0 or points > MAX_POINTS:
        raise ValueError(f"points={points!r} is outside 0..{MAX_POINTS}")
    if max_points <= 0:
        raise ValueError("max_points must be above 0")
    return [(first, min(max_points, points - first)) for first in range(0, points, max_points)]
