"""Handlers of the ``counter.*`` kinds."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def set_gate(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.counter.set_gate(float(step.args["seconds"]))
    return EMPTY_RESULT


def count(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Discriminator firings over one gate, kept as reading ``into``."""
    n = ctx.bench.counter.count(int(step.args["channel"]))
    return StepResult(results={"readings": {step.args["into"]: int(n)}})


HANDLERS = {"counter.gate": set_gate, "counter.count": count}
