"""Resume: what the store kept of a completed step, turned back into a ``StepResult``."""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

from sequencer.events import Measurement
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import PlannedStep

from .records import CompletedStepLike, StepResult


def yields_data(kind_name: str) -> bool:
    """True for kinds whose output (readings, traces, measurements) is replayed, not redone."""
    kind = KINDS[kind_name]
    return kind.measures or bool(kind.produces)


def reexecuted_on_resume(step: PlannedStep) -> bool:
    """Completed steps that run again on resume: configuring steps (so the bench is in the state
    the remaining steps expect) and the non-measuring steps of setup and cleanup."""
    kind = KINDS[step.kind]
    return kind.configures or (step.block in ("setup", "cleanup") and not yields_data(step.kind))


def measurement_from_store(m: Any) -> Measurement:
    """An events ``Measurement`` from a stored one (a None value, as stored for NaN, is NaN)."""
    if isinstance(m, Measurement):
        return m
    value = math.nan if m.value is None else float(m.value)
    return Measurement(
        quantity=m.quantity,
        value=value,
        unit=m.unit,
        uncertainty=m.uncertainty,
        channel=m.channel,
        output=m.output,
        aggressor=m.aggressor,
        low=m.low,
        high=m.high,
        verdict=m.verdict,
        qualifier=getattr(m, "qualifier", "") or "",
        reason=getattr(m, "reason", "") or "",
    )


def result_from_store(step: PlannedStep, done: CompletedStepLike) -> StepResult:
    """The result a completed step gave, rebuilt from the store."""
    traces = [replace(t, labels=dict(t.labels or step.labels)) for t in done.traces]
    return StepResult(
        results=dict(done.results or {}),
        traces=traces,
        measurements=[measurement_from_store(m) for m in done.measurements],
    )
