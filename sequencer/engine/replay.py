"""Resume: what the store kept of a completed step, turned back into a ``StepResult``."""

from __future__ import annotations

from dataclasses import replace

from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import PlannedStep

from .records import StepResult


def yields_data(kind_name: str) -> bool:
    """True for kinds whose output (readings, traces, measurements) is replayed, not redone."""
    kind = KINDS[kind_name]
    return kind.measures or bool(kind.produces)


def reexecuted_on_resume(step: PlannedStep) -> bool:
    """Completed steps that run again on resume: configuring steps (so the bench is in the state
    the remaining steps expect) and the non-measuring steps of setup and cleanup."""
    kind = KINDS[step.kind]
    return kind.configures or (step.block in ("setup", "cleanup") and not yields_data(step.kind))


def result_from_store(step: PlannedStep, done: StepResult) -> StepResult:
    """The result a completed step gave, rebuilt from the store."""
    traces = [replace(t, labels=dict(t.labels or step.labels)) for t in done.traces]
    return StepResult(
        results=dict(done.results or {}),
        traces=traces,
        measurements=list(done.measurements),  # the one record: NaN where nothing was measured
    )
