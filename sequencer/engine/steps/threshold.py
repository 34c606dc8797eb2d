"""Handler of ``threshold.level`` (mV at the discriminator)."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def set_level(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.threshold.set_level(int(step.args["channel"]), float(step.args["mV"]))
    return EMPTY_RESULT


HANDLERS = {"threshold.level": set_level}
