"""Handlers of the ``scope.*`` kinds (args in canonical units: mV, Hz, ns)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from drivers.trace import Trace
from sequencer.analysis.averaging import MeanToTarget, capture_heights
from sequencer.analysis.noise_stats import RmsToTarget
from sequencer.analysis.pulses import pretrigger_baseline
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import channel_of, output_of
from ..records import EMPTY_RESULT, StepResult

NOISE_SPAN_SIGMAS = 14.0
"""With ``follow_baseline`` the full scale is at least this many baseline RMS (±7 σ: a Gaussian
sample beyond it once in 4e11, standard normal tail)."""

RAILS_META = "rails_mV"
"""Key of a captured trace's ``meta``: "low,high", the input's range limits when it was captured."""


class BaselineNotMeasured(ValueError):
    """``follow_baseline`` without a baseline measured earlier for that channel and output."""


def set_input(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Range and offset of one input; with ``follow_baseline`` the offset adds the baseline_mV
    measured earlier for the step's channel and output, so a few mV of DC level do not put a
    narrow range on its rail, and the range widens to ``NOISE_SPAN_SIGMAS`` times the baseline RMS
    measured with it (reading ``baseline_rms_mV``), so a noisy output is not clipped either.  A baseline that could not be measured (NaN, its reason stored with
    its step) leaves the offset as given: the analyses then refuse what clips."""
    a = step.args
    offset = float(a.get("offset", 0.0))
    if a.get("follow_baseline"):
        found = ctx.measurement("baseline_mV", channel=channel_of(step), output=output_of(step))
        if found is None:
            raise BaselineNotMeasured(
                f"follow_baseline: no baseline_mV measured earlier for channel "
                f"{channel_of(step)} output {output_of(step)} (analyse.baseline first)"
            )
        if found.value == found.value:
            offset += found.value
    span = float(a["range"])
    if a.get("follow_baseline"):
        noise = ctx.select_readings("baseline_rms_mV", step.labels)
        if noise and noise[-1].value == noise[-1].value:
            span = max(span, NOISE_SPAN_SIGMAS * float(noise[-1].value))
    ctx.bench.scope.set_input(int(a["input"]), range_mV=span, offset_mV=offset)
    ctx.input_rails[int(a["input"])] = (offset - span / 2.0, offset + span / 2.0)
    return EMPTY_RESULT


def with_rails(trace: Trace, rails: tuple[float, float] | None) -> Trace:
    """``trace`` with the rails of its input recorded in its meta (unchanged when unknown)."""
    if rails is None:
        return trace
    return replace(trace, meta=_meta_with_rails(trace, rails))


def _meta_with_rails(trace: Trace, rails: tuple[float, float] | None) -> dict[str, str]:
    if rails is None:
        return trace.meta
    return {**trace.meta, RAILS_META: f"{rails[0]!r},{rails[1]!r}"}


def named_capture(
    trace: Trace, name: str, labels: dict, rails: tuple[float, float] | None
) -> Trace:
    """The captured ``trace`` under the procedure's name, with the step's labels and its input's
    rails.  Built field by field: ``dataclasses.replace`` walks the fields' metadata and costs ~5x
    the constructor on the instrument loop's critical path, once per trace; a test holds this to
    ``replace`` for every field of :class:`Trace`, so a field added there cannot be dropped here."""
    return Trace(volts=trace.volts, dt_s=trace.dt_s, t0_s=trace.t0_s, source=trace.source,
                 averages=trace.averages, meta=_meta_with_rails(trace, rails), name=name,
                 labels=labels, path=trace.path)  # fmt: skip


def rails_of(trace: Trace) -> tuple[float, float] | None:
    """The rails recorded by :func:`with_rails`, or None."""
    text = trace.meta.get(RAILS_META) if trace.meta else None
    if not text:
        return None
    low, high = (float(v) for v in text.split(","))
    return low, high


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
    """Acquire once, fetch every input; trace ``into[i]`` comes from input ``inputs[i]``.  With
    ``target_uncertainty`` the captures repeat and are averaged; with ``noise_target`` they repeat
    and each is handed on (several traces under each name)."""
    inputs = [int(i) for i in step.args["inputs"]]
    names = step.args["into"]
    names = [names] if isinstance(names, str) else list(names)
    if len(names) != len(inputs):
        raise ValueError(f"scope.capture: {len(inputs)} inputs but {len(names)} names in 'into'")
    target = float(step.args.get("target_uncertainty") or 0.0)
    noise_target = float(step.args.get("noise_target") or 0.0) / 100.0
    if target > 0.0 and noise_target > 0.0:
        raise ValueError("scope.capture: target_uncertainty (pulses, averaged) or noise_target "
                         "(noise, every capture kept), not both")  # fmt: skip
    results: dict = {}
    if target > 0.0:
        captures = [_capture_to_target(ctx, step, inputs, target)]
        results = captures[0][1]
    elif noise_target > 0.0:
        taken, results = _noise_to_target(ctx, step, inputs, noise_target)
        captures = [(t, results) for t in taken]
    else:
        captures = [(ctx.bench.scope.capture(inputs), results)]
    labels = dict(step.labels)
    rails = ctx.input_rails
    return StepResult(
        traces=[
            named_capture(t, n, labels, rails.get(i))
            for traces, _ in captures
            for n, t, i in zip(names, traces, inputs, strict=True)
        ],
        results=results,
    )


def _noise_to_target(
    ctx: RunContext, step: PlannedStep, inputs: list[int], target: float
) -> tuple[list[list[Trace]], dict]:
    """Noise captures (each kept as it is: averaging would divide the noise) repeated until the RMS
    of the first input's samples has a relative standard uncertainty at or below ``target``,
    counting their correlation (:mod:`sequencer.analysis.noise_stats`).  The stop flag is looked
    at before each capture; the count is bounded by ``max_captures``."""
    a = step.args
    rule = RmsToTarget(target, min_count=int(a.get("min_captures") or 1),
                       max_count=int(a.get("max_captures") or 8))  # fmt: skip
    taken: list[list[Trace]] = []
    while not rule.stopped:
        ctx.checkpoint()
        taken.append(list(ctx.bench.scope.capture(inputs)))
        rule.replace_all(np.stack([t[0].mV for t in taken]))
    p = rule.precision
    return taken, {
        "captures": len(taken),
        "rms_relative_uncertainty": p.relative_uncertainty if p else float("nan"),
        "effective_samples": p.effective if p else float("nan"),
        "target_reached": rule.reached,
        "stopped": rule.stopped,
    }


def _capture_to_target(
    ctx: RunContext, step: PlannedStep, inputs: list[int], target_mV: float
) -> tuple[list[Trace], dict]:
    """Captures repeated until the pulse height on the first input has a standard error of the mean
    at or below ``target_mV`` (GUM Type A, :mod:`sequencer.analysis.averaging`); every input's
    traces are averaged over the same captures.  The stop flag is looked at before each capture;
    the count is bounded by ``max_captures``."""
    a = step.args
    rule = MeanToTarget(target_mV, min_count=int(a.get("min_captures") or 3),
                        max_count=int(a.get("max_captures") or 16))  # fmt: skip
    taken: list[list[Trace]] = []
    while not rule.stopped:
        ctx.checkpoint()
        taken.append(list(ctx.bench.scope.capture(inputs)))
        first = [t[0] for t in taken]
        try:
            n = pretrigger_baseline(0, first[0].t0_ns, first[0].dt_ns)
        except ValueError as exc:
            raise ValueError(f"scope.capture target_uncertainty: {exc}") from None
        rule.replace_all(capture_heights(np.stack([t.mV for t in first]), n))
    averaged = [_mean_trace([t[k] for t in taken]) for k in range(len(inputs))]
    return averaged, {
        "captures": len(taken),
        "height_sem_mV": rule.standard_error,
        "target_reached": rule.reached,
        "stopped": rule.stopped,
    }


def _mean_trace(traces: list[Trace]) -> Trace:
    """The mean of captures of one input: its ``averages`` the sum of theirs."""
    first = traces[0]
    if len(traces) == 1:
        return first
    volts = np.mean(np.stack([t.volts for t in traces]), axis=0)
    return replace(first, volts=volts, averages=sum(t.averages for t in traces))


HANDLERS = {
    "scope.input": set_input,
    "scope.timebase": set_timebase,
    "scope.trigger": set_trigger,
    "scope.average": set_averages,
    "scope.capture": capture,
}
