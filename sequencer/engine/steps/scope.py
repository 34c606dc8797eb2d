"""Handlers of the ``scope.*`` kinds (args in canonical units: mV, Hz, ns)."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, NamedTrace, StepResult


def set_input(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.scope.set_input(
        int(a["input"]), range_mV=float(a["range"]), offset_mV=float(a.get("offset", 0.0))
    )
    return EMPTY_RESULT


def set_timebase(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.scope.set_timebase(
        sample_rate_hz=float(a["sample_rate"]),
        points=int(a["points"]),
        pretrigger_ns=float(a.get("pretrigger", 0.0)),
    )
    return EMPTY_RESULT


def set_trigger(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.scope.set_trigger(str(a["source"]), level_mV=float(a.get("level", 0.0)))
    return EMPTY_RESULT


def set_averages(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.scope.set_averages(int(step.args["count"]))
    return EMPTY_RESULT


def capture(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Acquire once, fetch every input; trace ``into[i]`` comes from input ``inputs[i]``."""
    inputs = [int(i) for i in step.args["inputs"]]
    names = step.args["into"]
    names = [names] if isinstance(names, str) else list(names)
    if len(names) != len(inputs):
        raise ValueError(f"scope.capture: {len(inputs)} inputs but {len(names)} names in 'into'")
    traces = ctx.bench.scope.capture(inputs)
    labels = dict(step.labels)
    return StepResult(
        traces=[
            NamedTrace(name=n, trace=t, labels=labels) for n, t in zip(names, traces, strict=True)
        ],
    )


HANDLERS = {
    "scope.input": set_input,
    "scope.timebase": set_timebase,
    "scope.trigger": set_trigger,
    "scope.average": set_averages,
    "scope.capture": capture,
}
