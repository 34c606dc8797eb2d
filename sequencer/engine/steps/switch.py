"""Handlers of the ``switch.*`` kinds (board channels from 1, outputs by name)."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def route(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.switch.route(int(a["channel"]), str(a["output"]), int(a["input"]))
    return EMPTY_RESULT


def inject(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.switch.inject(int(step.args["channel"]))
    return EMPTY_RESULT


def open_all(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.switch.open_all()
    return EMPTY_RESULT


HANDLERS = {"switch.route": route, "switch.inject": inject, "switch.open_all": open_all}
