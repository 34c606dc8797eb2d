"""Handlers of the ``pulser.*`` kinds (args in canonical units: mV, ns, Hz)."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def set_amplitude(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.set_amplitude(mV=float(step.args["mV"]))
    return EMPTY_RESULT


def set_shape(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.pulser.set_shape(
        width_ns=a.get("width"), leading_ns=a.get("leading"), trailing_ns=a.get("trailing")
    )
    return EMPTY_RESULT


def set_rate(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.set_rate(hz=float(step.args["hz"]))
    return EMPTY_RESULT


def set_burst(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.set_burst(count=int(step.args["count"]))
    return EMPTY_RESULT


def set_output(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.set_output(on=bool(step.args["on"]))
    return EMPTY_RESULT


def set_sine(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    ctx.bench.pulser.set_sine(
        hz=float(a["frequency"]), mV=float(a["amplitude"]), offset_mV=float(a.get("offset") or 0.0)
    )
    return EMPTY_RESULT


def set_pulses(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.set_pulses()
    return EMPTY_RESULT


def trigger(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.pulser.trigger()
    return EMPTY_RESULT


HANDLERS = {
    "pulser.amplitude": set_amplitude,
    "pulser.shape": set_shape,
    "pulser.rate": set_rate,
    "pulser.burst": set_burst,
    "pulser.output": set_output,
    "pulser.trigger": trigger,
    "pulser.sine": set_sine,
    "pulser.pulses": set_pulses,
}
