"""Handlers of the ``mca.*`` and ``temperature.*`` kinds (light-sensor benches)."""

from __future__ import annotations

from typing import Any

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def _role(ctx: RunContext, name: str) -> Any:
    driver = ctx.bench.role(name)
    if driver is None:  # preflight checks the roles a plan uses; this is the last line
        raise ValueError(f"the bench has no {name!r} instrument")
    return driver


def set_range(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    _role(ctx, "mca").set_range(
        lower_mV=float(a["lower"]), upper_mV=float(a["upper"]), bins=int(a["bins"])
    )
    return EMPTY_RESULT


def set_trigger(ctx: RunContext, step: PlannedStep) -> StepResult:
    _role(ctx, "mca").set_trigger(str(step.args["source"]))
    return EMPTY_RESULT


def acquire(ctx: RunContext, step: PlannedStep) -> StepResult:
    """One histogram, kept as reading ``into`` (range, counts per bin, events outside)."""
    a = step.args
    hist = _role(ctx, "mca").acquire(
        int(a["channel"]), int(a["events"]), expected_s=float(a.get("expected") or 0.0)
    )
    reading = {
        "lower_mV": hist.lower_mV,
        "upper_mV": hist.upper_mV,
        "counts": [int(n) for n in hist.counts],
        "below": hist.below,
        "above": hist.above,
    }
    return StepResult(results={"readings": {a["into"]: reading}, "events": hist.events})


def read_temperature(ctx: RunContext, step: PlannedStep) -> StepResult:
    value = _role(ctx, "temperature").read_C()
    return StepResult(results={"readings": {step.args["into"]: value}})


HANDLERS = {
    "mca.range": set_range,
    "mca.trigger": set_trigger,
    "mca.acquire": acquire,
    "temperature.read": read_temperature,
}
