"""What the steps of one run share: the bench, captured traces and readings, measurements so far.

Analysis steps find their inputs here by name and labels: an item is in an analysis step's scope when
its labels contain (equal on) every label of the analysis step (its loop scope, e.g. ``channel=3,
output='x5'``); items come back in capture order.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from drivers.trace import Trace
from sequencer.errors import RunAborted
from sequencer.events import Event, Measurement
from sequencer.procedure.plan_model import Plan, PlannedStep

from .records import RunOptions


@dataclass(frozen=True)
class Reading:
    """A named value a step read (a count, a bias reading, a typed entry) with its step's labels."""

    name: str
    value: Any
    labels: Mapping[str, Any] = field(default_factory=dict)


def in_scope(labels: Mapping[str, Any], scope: Mapping[str, Any]) -> bool:
    """True when ``labels`` equal ``scope`` on every key of ``scope``."""
    return all(k in labels and labels[k] == v for k, v in scope.items())


class StopFlag:
    """A request to stop the run, set from a signal handler or the interlock watcher thread."""

    def __init__(self) -> None:
        self._event = threading.Event()
        self.cause = ""
        self.reason = ""
        self.requests = 0  # every request counts (a second signal cuts a ramp-down short)
        #: Whether a stop was requested: a plain attribute, looked at before every step and between
        #: the chunks of every long read (set after cause and reason, so a reader that sees it True
        #: sees them too; the event is for waiting only).
        self.requested = False

    def request(self, cause: str, reason: str) -> None:
        """Ask the run to stop; the first request gives the cause, every one is counted."""
        self.requests += 1
        if not self._event.is_set():
            self.cause, self.reason = cause, reason
            self.requested = True
            self._event.set()

    def wait(self, seconds: float) -> bool:
        """Sleep up to ``seconds``; True at once when a stop is requested."""
        return self._event.wait(max(0.0, seconds))


class RunContext:
    """State of one run that handlers read and the runner feeds."""

    def __init__(
        self,
        *,
        plan: Plan,
        bench: Any,
        run_id: int,
        emit: Callable[[Event], None],
        options: RunOptions,
        clock: Callable[[], datetime],
        stop: StopFlag,
    ) -> None:
        self.plan = plan
        self.bench = bench
        self.run_id = run_id
        self.emit = emit
        self.options = options
        self.clock = clock
        self.stop = stop
        self.step: PlannedStep | None = None
        self.guard: Any = None  # safety.BiasGuard, set by the runner
        self.in_cleanup = False  # the cleanup block runs to its end whatever was requested
        self.traces: list[Trace] = []
        self.readings: list[Reading] = []
        self.measurements: list[Measurement] = []
        # scope input -> (low, high) rails in mV, from the last scope.input step: a sample there is
        # clipped (analyses refuse it)
        self.input_rails: dict[int, tuple[float, float]] = {}

    @property
    def path(self) -> str:
        return self.step.path if self.step is not None else ""

    def checkpoint(self) -> None:
        """Raise ``RunAborted`` when a stop was requested (signal, interlock watcher)."""
        if self.stop.requested and not self.in_cleanup:
            raise RunAborted(self.stop.reason, cause=self.stop.cause, step_path=self.path)

    def sleep(self, seconds: float, *, slice_s: float = 0.1) -> None:
        """Wait ``seconds``, waking at once for a stop request and checking the guard each slice."""
        end = time.monotonic() + seconds
        while True:
            self.checkpoint()
            left = end - time.monotonic()
            if left <= 0:
                return
            if self.in_cleanup:
                time.sleep(min(left, slice_s))
            else:
                self.stop.wait(min(left, slice_s))

    # -- items --------------------------------------------------------------------------------
    def add_trace(self, item: Trace) -> None:
        self.traces.append(item)

    def add_reading(self, item: Reading) -> None:
        self.readings.append(item)

    def add_measurement(self, m: Measurement) -> None:
        self.measurements.append(m)

    def select_traces(self, name: str, scope: Mapping[str, Any]) -> list[Trace]:
        """Traces called ``name`` in ``scope``, in capture order."""
        return [t for t in self.traces if t.name == name and in_scope(t.labels, scope)]

    def select_readings(self, name: str, scope: Mapping[str, Any]) -> list[Reading]:
        """Readings called ``name`` in ``scope``, in the order they were read."""
        return [r for r in self.readings if r.name == name and in_scope(r.labels, scope)]

    def measured(self, quantity: str, *, channel: int | None, output: str | None) -> float | None:
        """The latest value of ``quantity`` measured in this run for that channel and output."""
        m = self.measurement(quantity, channel=channel, output=output)
        return None if m is None else m.value

    def measurement(
        self, quantity: str, *, channel: int | None, output: str | None
    ) -> Measurement | None:
        """The latest measurement of ``quantity`` in this run for that channel and output."""
        for m in reversed(self.measurements):
            if m.quantity == quantity and m.channel == channel and m.output == output:
                return m
        return None
