"""Handlers of the ``bias.*`` kinds; every voltage change goes through the run's ``BiasGuard``."""

from __future__ import annotations

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import EMPTY_RESULT, StepResult


def set_limit(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Current limit (trip) in µA; the guard also aborts on readings above it."""
    current = float(step.args["current"])
    ctx.bench.bias.set_current_limit(current)
    guard = ctx.guard
    guard.touched = True
    guard.limit_applied = True
    bench_max = guard.current_limit_uA
    guard.current_limit_uA = current if bench_max is None else min(current, bench_max)
    guard.record("current_limit", uA=current)
    return EMPTY_RESULT


def ramp(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Ramp to ``volts`` (V) at ``rate`` (V/s, default the bench limit) and wait until reached;
    switches the output on at 0 V first if it is off."""
    guard = ctx.guard
    guard.touched = True
    volts = float(step.args["volts"])
    rate = step.args.get("rate")
    rate = None if rate is None else float(rate)
    if volts == 0.0:  # going down is always allowed, and a no-op with the output off at 0 V
        bias = ctx.bench.bias
        if not bias.output_on():
            measured = bias.voltage()  # an output that reads off at a voltage is not believed
            if abs(measured) <= ctx.options.ramp_tolerance_V:
                return StepResult(results={"measured_V": measured, "output": False})
        return StepResult(results={"measured_V": guard.ramp(0.0, rate)})
    guard.arm()
    guard.switch_on()
    return StepResult(results={"measured_V": guard.ramp(volts, rate)})


def set_output(ctx: RunContext, step: PlannedStep) -> StepResult:
    """On: at 0 V (acknowledged first).  Off: ramp to 0 V, then off."""
    guard = ctx.guard
    guard.touched = True
    if step.args["on"]:
        guard.arm()
        guard.switch_on()
    else:
        guard.switch_off()
    return EMPTY_RESULT


def read(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Measured voltage (V) and current (A), kept as reading ``into``."""
    bias = ctx.bench.bias
    ctx.guard.touched = True
    volts, amps = bias.voltage(), bias.current_A()
    ctx.guard.record("reading", volts=volts, current_A=amps)
    return StepResult(
        results={"readings": {step.args["into"]: {"volts": volts, "current_A": amps}}}
    )


HANDLERS = {
    "bias.limit": set_limit,
    "bias.ramp": ramp,
    "bias.output": set_output,
    "bias.read": read,
}
