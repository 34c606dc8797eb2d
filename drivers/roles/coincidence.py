"""Coincidence unit: two inputs, a coincidence window, an adjustable delay per input, counts over a gate.

Units: the API takes ns, mV and seconds; the wire carries SI base units as the dialect's header says.
A gate gives the coincidences and each input's singles together (one fetch, so the three counts come
from the same gate).  Input thresholds are optional: a unit without them has no ``set_threshold``
operation in its dialect, and :meth:`CoincidenceUnit.set_threshold` refuses with the reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from drivers.dialect import Dialect
from drivers.errors import ProtocolError
from drivers.roles.base import RoleDriver, check_range
from drivers.scpi.session import ScpiSession

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec

#: Extra time allowed on top of the gate before the fetch query times out (ms).
GATE_MARGIN_MS = 2000
INPUTS = (1, 2)
MAX_WINDOW_NS = 1000.0
MAX_DELAY_NS = 1000.0
MAX_THRESHOLD_MV = 2500.0
MAX_COUNT = 2.0**53


@dataclass(frozen=True, kw_only=True)
class CoincidenceCounts:
    """Counts of one gate: coincidences and the singles of inputs 1 and 2."""

    coincidences: int
    singles: tuple[int, int]
    gate_s: float

    @property
    def coincidence_rate_hz(self) -> float:
        return self.coincidences / self.gate_s

    @property
    def singles_rate_hz(self) -> tuple[float, float]:
        return (self.singles[0] / self.gate_s, self.singles[1] / self.gate_s)


class CoincidenceUnit(RoleDriver):
    """``set_window(ns)``, ``set_delay(input, ns)``, ``set_threshold(input, mV)``, ``count()``."""

    role = "coincidence"

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        super().__init__(session, dialect, spec)
        self._gate_s: float | None = None

    def set_window(self, ns: float) -> None:
        """Coincidence window τ: inputs closer than τ in time make a coincidence."""
        window = check_range("ns", ns, 0.0, MAX_WINDOW_NS)
        if window <= 0:
            raise ValueError("ns must be above 0")
        self._write("set_window", seconds=window * 1e-9)

    def window_ns(self) -> float:
        return float(self._query("get_window")) * 1e9

    def set_delay(self, input: int, ns: float) -> None:
        """Delay added to ``input`` (1 or 2), in ns."""
        self._write(
            "set_delay",
            input=_input(input),
            seconds=check_range("ns", ns, 0.0, MAX_DELAY_NS) * 1e-9,
        )

    def set_relative_delay(self, ns: float) -> None:
        """Input 2 later than input 1 by ``ns`` (negative: earlier), the other input's delay 0."""
        value = check_range("ns", ns, -MAX_DELAY_NS, MAX_DELAY_NS)
        self.set_delay(1, max(-value, 0.0))
        self.set_delay(2, max(value, 0.0))

    def set_threshold(self, input: int, mV: float) -> None:
        """Discriminator threshold of ``input``, if the unit has one."""
        if not self.dialect.has(self.role, "set_threshold"):
            raise ValueError(
                f"dialect {self.dialect.name!r} declares no coincidence.set_threshold: "
                "this unit has no input thresholds"
            )
        level = check_range("mV", mV, -MAX_THRESHOLD_MV, MAX_THRESHOLD_MV)
        self._write("set_threshold", input=_input(input), volts=level * 1e-3)

    def set_gate(self, seconds: float) -> None:
        gate = check_range("seconds", seconds, 0.0, 3600.0)
        if gate <= 0:
            raise ValueError("seconds must be above 0")
        self._write("set_gate_time", seconds=gate)
        self._gate_s = gate

    def gate_s(self) -> float:
        if self._gate_s is None:
            self._gate_s = float(self._query("get_gate_time"))
        return self._gate_s

    def count(self) -> CoincidenceCounts:
        """Start one gate; its coincidences and singles (a short or odd reply is refused)."""
        with self.session.lock:
            gate = self.gate_s()
            timeout_ms = int(gate * 1000) + max(GATE_MARGIN_MS, self.session.transport.timeout_ms)
            self._write("start", reapply=False)
            values = self._query("counts", timeout_ms=timeout_ms)
        return _counts(values, gate, self.address)


def _input(value: int) -> int:
    if int(value) != value or int(value) not in INPUTS:
        raise ValueError(f"input={value!r} must be 1 or 2")
    return int(value)


def _whole_count(value: float) -> bool:
    """A finite whole number from 0 below 2**53 (an overrange 9.91E+37 is not a count)."""
    return math.isfinite(value) and 0 <= value < MAX_COUNT and value == int(value)


def _counts(values: list[float], gate_s: float, address: str) -> CoincidenceCounts:
    if len(values) != 3 or not all(_whole_count(v) for v in values):
        raise ProtocolError(
            f"coincidence counts must be three whole numbers >= 0 "
            f"(coincidences, singles 1, singles 2), got {values!r}",
            address=address,
        )
    c, s1, s2 = (int(v) for v in values)
    if c > min(s1, s2):
        raise ProtocolError(
            f"coincidences {c} exceed the singles ({s1}, {s2}): not a consistent reading",
            address=address,
        )
    return CoincidenceCounts(coincidences=c, singles=(s1, s2), gate_s=gate_s)
