"""Handlers of the discriminator-timing analyses (``analyse.walk``, ``analyse.jitter``): leading-edge
and constant-fraction times of captured fast pulses, judged as ``time_walk_ns``, ``cf_walk_ns`` and
``timing_jitter_ns``; and of the discriminator's own logic output (``analyse.output_walk``,
``analyse.output_jitter``): the leading edge of each logic pulse at half its swing, judged as
``disc_walk_ns`` and ``disc_jitter_ns`` - what the module's discriminator (leading-edge or
constant-fraction, as built) does, not what an analysis of its input would.

Times are taken on each trace's own axis (t = 0 the trigger), so they compare across captures.  The
jitter step also states what the standard estimate σ_noise/(dV/dt) predicts from the same traces
(baseline RMS over the mean trace's slope at the crossing), kept with the step's results.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from drivers.trace import Trace
from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import measure
from ..records import StepResult


class TimingInputError(ValueError):
    """The run holds no usable traces for a timing step."""


def _traces(ctx: RunContext, step: PlannedStep) -> tuple[list[Trace], np.ndarray, float]:
    name = step.args["traces"]
    items = ctx.select_traces(name, step.labels)
    if not items:
        raise TimingInputError(f"no traces called {name!r} in the scope {dict(step.labels)}")
    dt = items[0].dt_ns
    t0 = items[0].t0_ns
    if any(abs(i.dt_ns - dt) > 1e-9 * dt or abs(i.t0_ns - t0) > 1e-6 for i in items):
        raise TimingInputError("the traces of one timing step have different time bases")
    return items, np.vstack([i.mV for i in items]), dt


def _baseline(step: PlannedStep, items: list[Trace]) -> int:
    trace = items[0]
    try:
        return an.pretrigger_baseline(
            int(step.args.get("n_baseline") or 0), trace.t0_ns, trace.dt_ns
        )
    except ValueError as exc:
        raise TimingInputError(f"traces {items[0].name!r}: {exc}") from None


def analyse_walk(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Leading-edge walk and constant-fraction walk over an amplitude sweep."""
    a = step.args
    items, rows, dt = _traces(ctx, step)
    try:
        amps = np.array([float(i.labels[a["x"]]) for i in items])
    except KeyError:
        raise TimingInputError(f"sweep variable {a['x']!r} is not among the labels") from None
    t0, nb = items[0].t0_ns, _baseline(step, items)
    le = an.leading_edge_times(rows, dt, float(a["threshold"]), t0_ns=t0, n_baseline=nb)
    cf = an.constant_fraction_times(
        rows,
        dt,
        fraction=float(a.get("fraction") or 0.3),
        delay_ns=float(a.get("delay") or 2.0),
        arming_mV=float(a["threshold"]),
        t0_ns=t0,
        n_baseline=nb,
    )
    walk, cf_walk = an.time_walk(amps, le), an.time_walk(amps, cf)
    return StepResult(
        results={
            "amplitudes_mV": walk.amplitudes_mV.tolist(),
            "leading_edge_ns": walk.mean_ns.tolist(),
            "constant_fraction_ns": cf_walk.mean_ns.tolist(),
        },
        measurements=[
            measure(ctx, step, "time_walk_ns", walk.walk_ns, output=None),
            measure(ctx, step, "cf_walk_ns", cf_walk.walk_ns, output=None),
        ],
    )


def analyse_jitter(ctx: RunContext, step: PlannedStep) -> StepResult:
    """RMS of the leading-edge times of single captures at one amplitude."""
    items, rows, dt = _traces(ctx, step)
    if len(items) < 2:
        raise TimingInputError("jitter needs at least two single captures")
    t0, nb = items[0].t0_ns, _baseline(step, items)
    threshold = float(step.args["threshold"])
    times = an.leading_edge_times(rows, dt, threshold, t0_ns=t0, n_baseline=nb)
    jitter = an.timing_jitter(times)
    results: dict[str, Any] = {"captures": len(items), "refused": jitter.refused}
    mean = rows.mean(axis=0) - rows[:, :nb].mean()
    k = round((jitter.mean_ns - t0) / dt)
    if 1 <= k < mean.size - 1:
        slope = (mean[k + 1] - mean[k - 1]) / (2 * dt)
        noise = float(np.mean(rows[:, :nb].std(axis=1, ddof=1)))
        if slope > 0 and math.isfinite(noise):
            results["expected_jitter_ns"] = (
                an.expected_jitter_ns(noise, slope) if noise > 0 else 0.0
            )
            results["slope_mV_per_ns"] = float(slope)
            results["noise_mV"] = noise
    return StepResult(
        results=results,
        measurements=[
            measure(
                ctx,
                step,
                "timing_jitter_ns",
                jitter.rms_ns,
                uncertainty=jitter.uncertainty_ns,
                output=None,
            )
        ],
    )


def _output_times(ctx: RunContext, step: PlannedStep) -> tuple[list[Trace], np.ndarray]:
    """Leading-edge times of the discriminator's logic pulses at ``level`` (half the logic swing)
    above their baseline; NaN where a capture holds no output pulse."""
    items, rows, dt = _traces(ctx, step)
    t0, nb = items[0].t0_ns, _baseline(step, items)
    level = float(step.args["level"])
    return items, an.leading_edge_times(rows, dt, level, t0_ns=t0, n_baseline=nb)


def analyse_output_walk(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Walk of the discriminator's OUTPUT over an amplitude sweep (its mode's walk, as built)."""
    items, times = _output_times(ctx, step)
    try:
        amps = np.array([float(i.labels[step.args["x"]]) for i in items])
    except KeyError:
        raise TimingInputError(f"sweep variable {step.args['x']!r} is not among the labels") from None
    missing = int(np.count_nonzero(~np.isfinite(times)))
    if missing:
        raise TimingInputError(f"no output pulse in {missing} of {times.size} captures")
    walk = an.time_walk(amps, times)
    return StepResult(
        results={"amplitudes_mV": walk.amplitudes_mV.tolist(), "output_ns": walk.mean_ns.tolist()},
        measurements=[measure(ctx, step, "disc_walk_ns", walk.walk_ns, output=None)],
    )


def analyse_output_jitter(ctx: RunContext, step: PlannedStep) -> StepResult:
    """RMS of the discriminator's OUTPUT time over single captures at one amplitude."""
    items, times = _output_times(ctx, step)
    jitter = an.timing_jitter(times)
    return StepResult(
        results={"captures": len(items), "refused": jitter.refused, "mean_ns": jitter.mean_ns},
        measurements=[
            measure(
                ctx, step, "disc_jitter_ns", jitter.rms_ns, uncertainty=jitter.uncertainty_ns,
                output=None,
            )
        ],
    )


HANDLERS = {
    "analyse.walk": analyse_walk,
    "analyse.jitter": analyse_jitter,
    "analyse.output_walk": analyse_output_walk,
    "analyse.output_jitter": analyse_output_jitter,
}
