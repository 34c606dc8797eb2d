"""The client's own work per run, counted rather than timed (used by ``bench_engine``).

The engine runs the scan of :mod:`tests.benchmarks.bench_engine` against the replies it received in a
recorded run, handed back by a replaying transport (no I/O, no simulator, no waits), and the Python
bytecodes it executes are counted with ``sys.settrace`` opcode events (Python standard library,
``sys.settrace`` / ``frame.f_trace_opcodes``).  The same count for the plan as direct driver calls is
the baseline: the ratio is the engine layer's own share.  A count does not move with the machine's
load (the wall-clock rows move by about +-0.15 between runs), so a change to the instrument loop can
be judged by it; C code (numpy, the socket calls) is not in it.
"""

from __future__ import annotations

import collections
import sys
from collections.abc import Callable
from typing import Any

from drivers.bench import open_bench, open_transport
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.procedure.plan_model import Plan

Exchange = tuple[str, str, Any]  # (address, "write" | "read" | "read_bytes", text or reply)


class Taping:
    """Wraps a real transport and keeps every exchange with its reply (benchmark only)."""

    def __init__(self, inner: Any, tape: list[Exchange]) -> None:
        self._inner, self._tape = inner, tape

    def __getattr__(self, name: str) -> Any:
        return getattr(self._inner, name)

    def write(self, text: str) -> None:
        self._tape.append((self._inner.address, "write", text))
        self._inner.write(text)

    def read(self) -> bytes:
        reply = self._inner.read()
        self._tape.append((self._inner.address, "read", reply))
        return reply

    def read_bytes(self, n: int) -> bytes:
        data = self._inner.read_bytes(n)
        self._tape.append((self._inner.address, "read_bytes", data))
        return data


class Replaying:
    """A transport that hands back a tape's replies and checks each command against it."""

    def __init__(self, real: Any, tape: collections.deque[Exchange]) -> None:
        self._real, self._tape = real, tape
        self.address = real.address
        self.settings = real.settings
        self.read_termination = real.read_termination
        self.timeout_ms = real.timeout_ms

    def _next(self, op: str) -> Any:
        address, kind, value = self._tape.popleft()
        if (address, kind) != (self.address, op):
            raise RuntimeError(f"replay out of step: {op} at {self.address}, tape has {kind} at {address}")
        return value

    def write(self, text: str) -> None:
        if self._next("write") != text:
            raise RuntimeError(f"replay out of step: the engine sent {text!r}")

    def read(self) -> bytes:
        return self._next("read")  # type: ignore[no-any-return]

    def read_bytes(self, n: int) -> bytes:
        data = self._next("read_bytes")
        if len(data) != n:
            raise RuntimeError(f"replay out of step: {n} bytes asked, {len(data)} on tape")
        return data  # type: ignore[no-any-return]

    def wait_for_input(self, timeout_s: float) -> bool:
        return True

    def more_pending(self, wait_s: float = 0.005) -> bool:
        return False

    def drain(self) -> None:
        return None

    def reconnect(self) -> None:
        raise RuntimeError("a replayed run does not reconnect")

    def close(self) -> None:
        self._real.close()


def _count(body: Callable[[], object]) -> int:
    """Bytecodes executed by ``body()`` (and everything it calls in Python)."""
    count = 0

    def local(frame: Any, event: str, arg: Any) -> Any:
        nonlocal count
        if event == "opcode":
            count += 1
        return local

    def calls(frame: Any, event: str, arg: Any) -> Any:
        frame.f_trace_opcodes = True
        return local

    sys.settrace(calls)
    try:
        body()
    finally:
        sys.settrace(None)
    return count


def bytecodes_per_run(plan: Plan, spec: Any, drive: Callable[[Plan, Any], None]) -> tuple[int, int]:
    """(engine, direct driver calls): bytecodes per run of ``plan``, each replayed from a recorded
    run of its own; ``drive(plan, bench)`` makes the direct calls.  Counted on the third replay (the
    first two fill what is kept between runs, as in a live process); opening and closing the bench
    are not counted."""

    def engine(bench: Any) -> Callable[[], object]:
        info = describe_run(plan, bench, identities=False)
        return Runner(plan, bench, run_id=1, subscribers=[], options=RunOptions(), info=info).run

    def direct(bench: Any) -> Callable[[], object]:
        return lambda: drive(plan, bench)

    return _replayed(spec, engine), _replayed(spec, direct)


def _replayed(spec: Any, prepare: Callable[[Any], Callable[[], object]]) -> int:
    tape: list[Exchange] = []
    with open_bench(spec, opener=lambda s: Taping(open_transport(s), tape)) as bench:
        prepare(bench)()
    replay: collections.deque[Exchange] = collections.deque()
    counted = 0
    for _ in range(3):
        replay.extend(tape)
        with open_bench(spec, opener=lambda s: Replaying(open_transport(s), replay)) as bench:
            counted = _count(prepare(bench))
        if replay:
            raise RuntimeError(f"replay ended {len(replay)} exchanges early")
    return counted
