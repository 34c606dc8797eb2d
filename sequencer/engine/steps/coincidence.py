"""Handlers of the ``coincidence.*`` kinds and of the coincidence analyses (``analyse.delay_curve``,
``analyse.accidentals``, ``analyse.output_width``: the unit's logic output captured by the scope).

A ``coincidence.count`` reading is ``{"coincidences": C, "singles": [S1, S2], "gate_s": G}``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import Reading, RunContext
from ..judge import channel_of, measure
from ..records import EMPTY_RESULT, StepResult


class CoincidenceInputError(ValueError):
    """The run holds no usable coincidence counts for an analysis step."""


def set_window(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.coincidence.set_window(float(step.args["ns"]))
    return EMPTY_RESULT


def set_delay(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.coincidence.set_relative_delay(float(step.args["ns"]))
    return EMPTY_RESULT


def set_threshold(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.coincidence.set_threshold(int(step.args["input"]), float(step.args["mV"]))
    return EMPTY_RESULT


def set_gate(ctx: RunContext, step: PlannedStep) -> StepResult:
    ctx.bench.coincidence.set_gate(float(step.args["seconds"]))
    return EMPTY_RESULT


def count(ctx: RunContext, step: PlannedStep) -> StepResult:
    """One gate, kept as reading ``into``."""
    n = ctx.bench.coincidence.count()
    value = {"coincidences": n.coincidences, "singles": list(n.singles), "gate_s": n.gate_s}
    return StepResult(results={"readings": {step.args["into"]: value}})


def _counts(ctx: RunContext, step: PlannedStep) -> list[Reading]:
    name = step.args["counts"]
    items = ctx.select_readings(name, step.labels)
    if not items:
        raise CoincidenceInputError(f"no readings called {name!r} in the scope {dict(step.labels)}")
    for item in items:
        if not isinstance(item.value, dict) or "coincidences" not in item.value:
            raise CoincidenceInputError(f"reading {name!r} is not a coincidence.count reading")
    return items


def _rate(item: Reading) -> float:
    return float(item.value["coincidences"]) / float(item.value["gate_s"])


def analyse_delay_curve(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Resolving time, plateau and (with ``trials``) efficiency at the plateau."""
    a = step.args
    items = _counts(ctx, step)
    try:
        delays = np.array([float(i.labels[a["x"]]) for i in items])
    except KeyError:
        raise CoincidenceInputError(f"sweep variable {a['x']!r} is not among the labels") from None
    rates = np.array([_rate(i) for i in items])
    curve = an.fit_delay_curve(delays, rates)
    measurements = [
        measure(ctx, step, "resolving_time_ns", curve.resolving_time_ns, output=None),
        measure(
            ctx,
            step,
            "coincidence_plateau_hz",
            curve.plateau_hz,
            uncertainty=curve.plateau_uncertainty_hz,
            output=None,
        ),
    ]
    trials = int(a.get("trials") or 0)
    if trials > 0:
        gate = float(items[0].value["gate_s"])
        sent = trials / gate  # correlated events per second
        eff = min((curve.plateau_hz - curve.background_hz) / sent, 1.0)  # accidentals removed
        unc = math.sqrt(max(eff * (1 - eff), 1.0 / trials) / (trials * curve.plateau_points))
        measurements.append(
            measure(
                ctx,
                step,
                "coincidence_efficiency_pct",
                100 * eff,
                uncertainty=100 * unc,
                output=None,
            )
        )
    results: dict[str, Any] = {
        "points": len(items),
        "fwhm_ns": curve.fwhm_ns,
        "centre_ns": curve.centre_ns,
        "background_hz": curve.background_hz,
        "series": {"delay_ns": delays.tolist(), "rate_hz": rates.tolist()},
    }
    return StepResult(results=results, measurements=measurements)


def analyse_accidentals(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Measured accidental rate over 2τR₁R₂ from the summed gates (singles rates measured too)."""
    items = _counts(ctx, step)
    tau = step.args.get("resolving_time")
    if tau is None:
        found = ctx.measurement("resolving_time_ns", channel=channel_of(step), output=None)
        if found is None or not math.isfinite(found.value):
            raise CoincidenceInputError("no resolving time measured earlier: give resolving_time:")
        tau = found.value
    gate = sum(float(i.value["gate_s"]) for i in items)
    c = sum(int(i.value["coincidences"]) for i in items)
    r1 = sum(int(i.value["singles"][0]) for i in items) / gate
    r2 = sum(int(i.value["singles"][1]) for i in items) / gate
    expected = an.accidental_rate_hz(float(tau), r1, r2) * gate
    if expected <= 0:
        raise CoincidenceInputError("no singles counted: no accidental rate to compare")
    ratio = c / expected
    return StepResult(
        results={"coincidences": c, "expected": expected, "rate1_hz": r1, "rate2_hz": r2},
        measurements=[
            measure(
                ctx,
                step,
                "accidental_ratio",
                ratio,
                uncertainty=math.sqrt(max(c, 1)) / expected,
                output=None,
            )
        ],
    )


def analyse_output_width(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Width of the unit's logic output between its 50 % crossings (``an.pulse_duration``), mean
    over the single captures that hold a whole output pulse (an input below 100 % efficiency
    misses some: counted in the results); none at all refuses the step."""
    name = step.args["traces"]
    items = ctx.select_traces(name, step.labels)
    if not items:
        raise CoincidenceInputError(f"no traces called {name!r} in the scope {dict(step.labels)}")
    trace = items[0]
    rows = np.vstack([i.mV for i in items])
    nb = an.pretrigger_baseline(int(step.args.get("n_baseline") or 0), trace.t0_ns, trace.dt_ns)
    widths = np.atleast_1d(
        an.pulse_duration(rows, trace.dt_ns, float(step.args["level"]), n_baseline=nb)
    )
    found = widths[np.isfinite(widths)]
    if found.size == 0:
        raise CoincidenceInputError(
            f"no whole output pulse in any of {widths.size} captures (no coincidence, or the "
            "record too short)"
        )
    err = float(found.std(ddof=1) / math.sqrt(found.size)) if found.size > 1 else None
    return StepResult(
        results={"widths_ns": found.tolist(), "captures_without_output": int(widths.size - found.size)},
        measurements=[
            measure(
                ctx, step, "coincidence_width_ns", float(found.mean()), uncertainty=err,
                channel=None, output=None,
            )
        ],
    )


HANDLERS = {
    "analyse.output_width": analyse_output_width,
    "coincidence.window": set_window,
    "coincidence.delay": set_delay,
    "coincidence.threshold": set_threshold,
    "coincidence.gate": set_gate,
    "coincidence.count": count,
    "analyse.delay_curve": analyse_delay_curve,
    "analyse.accidentals": analyse_accidentals,
}
