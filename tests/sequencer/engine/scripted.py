"""A scripted transport at the edge: each role answers from a small table; the bias follows its
setpoint at once (an instant ramp) unless told otherwise.  Everything above it is the real drivers."""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import Any

from drivers.bench import Bench, bench_from_mapping, open_bench
from drivers.errors import ConnectionClosed, InstrumentTimeout

NO_ERROR = '0,"No error"'


class ScriptedTransport:
    """The Transport contract of ``drivers.scpi.session`` over an in-memory instrument."""

    def __init__(self, role: str, address: str, bench_state: BenchState) -> None:
        self.role = role
        self.address = address
        self.timeout_ms = 5000
        self.state = bench_state
        self._replies: list[bytes] = []

    @property
    def read_termination(self) -> str:
        return "\n"

    def write(self, text: str) -> None:
        """One program message: its units (``;``-separated, a leading ``:`` read from the root)
        each logged and answered in turn, the replies joined with ``;`` (IEEE 488.2 §7.3, from
        memory), as the generic dialect's joined messages expect."""
        replies: list[str] = []
        for unit in text.split(";"):
            unit = unit.strip().removeprefix(":")
            self.state.log.append((self.role, unit))
            fault = self.state.fault_for(self.role, unit)
            if fault == "disconnect":
                raise ConnectionClosed("peer closed", address=self.address, command=unit)
            if fault == "no_reply":
                self.state.silent.add(self.role)
            reply = self.state.answer(self.role, unit)
            if reply is not None:
                replies.append(reply)
        if replies:
            self._replies.append(";".join(replies).encode())

    def read(self) -> bytes:
        if self.role in self.state.silent or not self._replies:
            self._replies.clear()
            raise InstrumentTimeout("no reply", address=self.address)
        return self._replies.pop(0)

    def read_bytes(self, n: int) -> bytes:
        raise NotImplementedError("no binary blocks in the scripted bench")

    def more_pending(self, wait_s: float = 0.005) -> bool:
        return bool(self._replies)

    def drain(self) -> None:
        self._replies.clear()

    def reconnect(self) -> None:
        self.state.reconnects += 1
        if self.role in self.state.dead:
            raise ConnectionClosed("still down", address=self.address)
        self.state.silent.discard(self.role)

    def close(self) -> None:
        pass


class BenchState:
    """The shared truth of the scripted instruments, with knobs for the abort tests."""

    def __init__(self) -> None:
        self.log: list[tuple[str, str]] = []
        self.bias = {"setpoint": 0.0, "output": False, "rate": 1.0, "limit_A": 1e-4}
        self.interlock_closed = True
        self.tripped = False
        self.resistance_ohm = 5e9  # 5000 MOhm bias line: I = V / R
        self.lag_polls = 0  # measured voltage lags the setpoint for this many reads
        self.faults: list[dict[str, Any]] = []  # {role, after_commands, kind}
        self.silent: set[str] = set()
        self.dead: set[str] = set()
        self.reconnects = 0
        self.on_query: Callable[[str, str], None] | None = None
        self.lies: dict[str, str] = {}  # bias query header (upper case) -> the reply it gets instead
        self._measured = 0.0
        self._slew_from = 0.0
        self._slew_at = time.monotonic()
        self._lag = 0
        self._counts: dict[str, int] = {}

    def fault_for(self, role: str, text: str) -> str | None:
        self._counts[role] = self._counts.get(role, 0) + 1
        for f in self.faults:
            if f["role"] == role and self._counts[role] > f["after_commands"]:
                return f["kind"]
        return None

    def sent(self, role: str) -> list[str]:
        return [t for r, t in self.log if r == role]

    def answer(self, role: str, text: str) -> str | None:
        if self.on_query is not None and text.endswith("?"):
            self.on_query(role, text)
        head, _, value = text.partition(" ")
        head = head.upper()
        if head == "*IDN?":
            return f"Nordlicht Scripted,{role.upper()}-1,NR-S-0001,0.1"
        if head.startswith("SYSTEM:ERROR") or head.startswith("SYST:ERR"):
            return NO_ERROR
        if head == "*OPC?":
            return "1"
        if role == "bias":
            return self._bias(head, value)
        if head.endswith("?"):
            return "0"
        return None

    def _bias(self, head: str, value: str) -> str | None:
        if head in self.lies:
            return self.lies[head]
        b = self.bias
        if head == "SOURCE:VOLTAGE:LEVEL:IMMEDIATE:AMPLITUDE":
            self._slew_from = self._slewed()
            self._slew_at = time.monotonic()
            b["setpoint"] = float(value)
            self._lag = self.lag_polls
        elif head == "SOURCE:VOLTAGE:SLEW":
            self._slew_from = self._slewed()
            self._slew_at = time.monotonic()
            b["rate"] = float(value)
        elif head == "SOURCE:CURRENT:LIMIT":
            b["limit_A"] = float(value)
        elif head == "OUTPUT:STATE":
            b["output"] = value.upper() in ("ON", "1")
            self._slew_from, self._slew_at = 0.0, time.monotonic()  # off drops to 0 V at once
        elif head == "OUTPUT:PROTECTION:CLEAR":
            self.tripped = False
        elif head == "SOURCE:VOLTAGE:LEVEL:IMMEDIATE:AMPLITUDE?":
            return f"{b['setpoint']:.6g}"
        elif head == "SOURCE:VOLTAGE:SLEW?":
            return f"{b['rate']:.6g}"
        elif head == "OUTPUT:STATE?":
            return "1" if b["output"] else "0"
        elif head == "MEASURE:VOLTAGE:DC?":
            return f"{self.measured():.6g}"
        elif head == "MEASURE:CURRENT:DC?":
            return f"{self.measured() / self.resistance_ohm:.6g}"
        elif head == "SYSTEM:INTERLOCK:STATE?":
            return "1" if self.interlock_closed else "0"
        elif head == "OUTPUT:PROTECTION:TRIPPED?":
            return "1" if self.tripped else "0"
        elif head.endswith("?"):
            return "0"
        return None

    def _slewed(self) -> float:
        """Where the output stands: it slews from its last value towards the set point at the
        programmed rate (a supply with a slew command does not jump; the drivers check that)."""
        b = self.bias
        if not b["output"] or self.tripped:
            return 0.0
        distance = b["setpoint"] - self._slew_from
        moved = min(abs(distance), b["rate"] * (time.monotonic() - self._slew_at))
        return self._slew_from + math.copysign(moved, distance)

    def settle(self) -> None:
        """The output stands at its set point already: a supply *found* live (the safe-state tests),
        not one being ramped, so what its meter reads does not depend on how long the test took to
        reach its first query."""
        self._slew_from = self.bias["setpoint"] if self.bias["output"] else 0.0
        self._slew_at = time.monotonic()

    def at_setpoint(self) -> bool:
        """True when the output has slewed all the way to the set point."""
        return abs(self._slewed() - self.bias["setpoint"]) < 1e-9

    def output_V(self) -> float:
        """The output voltage now (what the meter reads without lag)."""
        return self._slewed()

    def measured(self) -> float:
        target = self._slewed()
        if self._lag > 0:
            self._lag -= 1
            return self._measured
        self._measured = target
        return target


BIAS_LIMITS = {"max_volts": 60, "max_ramp_V_per_s": 10, "max_current_uA": 100}


def scripted_bench(
    state: BenchState,
    roles: tuple[str, ...] = ("pulser", "switch", "bias"),
    *,
    bias: dict[str, Any] | None = None,
) -> Bench:
    """A real ``Bench`` (bench file model, dialect, sessions, role drivers) over scripted links;
    ``bias``: more keys of the bias entry (``dialect``, ``hardware_interlock``)."""
    instruments: dict[str, Any] = {}
    for i, role in enumerate(roles):
        entry: dict[str, Any] = {"address": f"TCPIP0::127.0.0.1::{6000 + i}::SOCKET"}
        if role == "bias":
            entry.update(BIAS_LIMITS)
            entry.update(bias or {})
        instruments[role] = entry
    spec = bench_from_mapping({"bench": "scripted", "instruments": instruments})
    return open_bench(spec, opener=lambda s: ScriptedTransport(s.role, s.address, state))
