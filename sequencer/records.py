"""The records engine, store and reports share, one type per concept.

A leaf module (standard library only): ``sequencer.engine``, ``sequencer.store`` (its light read path
included) and ``sequencer.reports`` import it without importing each other, numpy or SQLAlchemy.
A trace is ``drivers.trace.Trace``; a measurement is ``Measurement`` and a step's result
``StepResult`` below (the engine's handlers make one; the store gives one back per completed step,
and resume replays it as it is).

A missing value has one spelling everywhere: ``value`` is NaN and ``reason`` says why (what the
analysis refused). ``Measurement.measured`` is the test for it. The database keeps a missing value as
SQL NULL; the store maps NaN -> NULL when it writes a row and NULL -> NaN when it reads one, and
nowhere else.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any, Literal

if TYPE_CHECKING:  # a type only: drivers.trace imports numpy
    from drivers.trace import Trace

Verdict = Literal["pass", "fail", "info"]


@dataclass(frozen=True)
class Measurement:
    """One judged value. ``channel`` is 1-based or None (per board); verdict pass/fail/info.

    ``run_id`` and ``path`` say where a stored measurement belongs (the store fills them in; a
    measurement the engine just made carries them on its ``MeasurementMade`` event instead).
    """

    quantity: str
    value: float          # NaN = not measured; ``reason`` says why
    unit: str
    uncertainty: float | None = None
    channel: int | None = None
    output: str | None = None
    aggressor: int | None = None
    low: float | None = None
    high: float | None = None
    verdict: Verdict = "info"
    qualifier: str = ""   # "" or "within uncertainty": value ± U straddles a limit (decision rule)
    reason: str = ""      # why ``value`` is NaN: what the analysis refused (empty for a value)
    run_id: int | None = None
    path: str = ""

    @property
    def measured(self) -> bool:
        """True when ``value`` is a number (not NaN: the analysis gave none)."""
        return not math.isnan(self.value)


@dataclass(frozen=True, kw_only=True)
class StepResult:
    """What a step produced: a handler's result, or what the store kept of a completed step.

    ``results`` is JSON-able; its ``readings`` entry (name -> value) feeds the context, so a
    replayed step restores exactly what the live step gave the later analysis steps. A handler
    leaves ``path``, ``kind``, the times and ``labels`` empty (the plan's step has them); the store
    fills them in from the step's row.
    """

    results: Mapping[str, Any] = field(default_factory=dict)
    traces: Sequence[Trace] = ()  # each with its name and its step's labels
    measurements: Sequence[Measurement] = ()
    settings: Mapping[str, Any] = field(default_factory=dict)
    path: str = ""
    kind: str = ""
    started_at: datetime | None = None
    finished_at: datetime | None = None
    labels: Mapping[str, Any] = field(default_factory=dict)   # channel, output, sweep values (typed)


__all__ = ["Measurement", "StepResult", "Verdict"]
