"""Checks of a plan against a bench before anything moves (the CLI turns problems into exit 2)."""

from __future__ import annotations

from typing import Any

from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import Plan, PlannedStep

from .records import Caution


def is_hazard(step: PlannedStep) -> bool:
    """True when the step can make a voltage live (declared on the step or by its kind)."""
    kind = KINDS.get(step.kind)
    return step.hazard or (kind is not None and kind.hazard)


def hazard_steps(plan: Plan) -> list[PlannedStep]:
    """The steps of ``plan`` that can make a voltage live, in order."""
    return [s for s in plan.steps if is_hazard(s)]


def requested_ramps(
    plan: Plan, default_rate: float | None
) -> list[tuple[PlannedStep, float, float | None]]:
    """(step, volts, rate V/s) of every ``bias.ramp``; rate falls back to ``default_rate``."""
    out = []
    for s in plan.steps:
        if s.kind == "bias.ramp":
            rate = s.args.get("rate")
            out.append((s, float(s.args["volts"]), default_rate if rate is None else float(rate)))
    return out


def check_plan_against_bench(plan: Plan, bench_spec: Any) -> list[str]:
    """Problems that forbid running ``plan`` on the bench described by ``bench_spec``.

    Checks that every step's kind is known and its role is on the bench, that a procedure with a
    hazard has a bias role, and that every requested voltage, ramp rate and current limit is within
    the bench file's ``max_volts``, ``max_ramp_V_per_s`` and ``max_current_uA``.  Empty = fine.
    """
    instruments = bench_spec.instruments
    name = getattr(bench_spec, "name", "") or "the bench"
    problems: list[str] = []
    missing: dict[str, list[str]] = {}
    for step in plan.steps:
        kind = KINDS.get(step.kind)
        if kind is None:
            problems.append(f"step {step.path}: unknown step kind {step.kind!r}")
        elif kind.role is not None and kind.role not in instruments:
            missing.setdefault(kind.role, []).append(step.path)
    for role, paths in missing.items():
        problems.append(
            f"role {role!r} is not on bench {name!r} but {len(paths)} step(s) need it "
            f"(first {paths[0]})"
        )
    hazards = hazard_steps(plan)
    if (hazards or plan.meta.hazards) and "bias" not in instruments:
        if "bias" not in missing:
            problems.append(f"the procedure declares a hazard but bench {name!r} has no bias role")
        return problems
    if "bias" in instruments:
        problems.extend(_bias_limits(plan, instruments["bias"]))
    return problems


def _bias_limits(plan: Plan, spec: Any) -> list[str]:
    max_v = getattr(spec, "max_volts", None)
    max_rate = getattr(spec, "max_ramp_V_per_s", None)
    max_i = getattr(spec, "max_current_uA", None)
    problems: list[str] = []
    ramps = requested_ramps(plan, max_rate)
    if ramps and max_v is None:
        problems.append("bench bias has no max_volts: refusing to ramp without a voltage limit")
    if ramps and max_rate is None:
        problems.append("bench bias has no max_ramp_V_per_s: refusing to ramp without a rate limit")
    for step, volts, rate in ramps:
        if max_v is not None and abs(volts) > max_v:
            problems.append(f"step {step.path}: {volts:g} V exceeds the bench limit {max_v:g} V")
        if rate is not None and max_rate is not None and rate > max_rate:
            problems.append(
                f"step {step.path}: ramp rate {rate:g} V/s exceeds the bench limit {max_rate:g} V/s"
            )
        if rate is not None and rate <= 0:
            problems.append(f"step {step.path}: ramp rate must be positive, got {rate:g} V/s")
    if max_v is not None and plan.meta.max_bias_volts > max_v:
        problems.append(
            f"the procedure requests up to {plan.meta.max_bias_volts:g} V, above the bench "
            f"limit {max_v:g} V"
        )
    if max_rate is not None and plan.meta.max_ramp_V_per_s > max_rate:
        problems.append(
            f"the procedure ramps at up to {plan.meta.max_ramp_V_per_s:g} V/s, above the bench "
            f"limit {max_rate:g} V/s"
        )
    for step in plan.steps:
        if step.kind == "bias.limit" and max_i is not None:
            current = float(step.args["current"])
            if current > max_i:
                problems.append(
                    f"step {step.path}: current limit {current:g} uA exceeds the bench limit "
                    f"{max_i:g} uA"
                )
    return problems


def build_caution(plan: Plan, bench_spec: Any) -> Caution:
    """The caution shown before the first hazard step of ``plan``."""
    spec = bench_spec.instruments.get("bias")
    max_rate = getattr(spec, "max_ramp_V_per_s", None)
    ramps = requested_ramps(plan, max_rate)
    max_v = max([abs(v) for _, v, _ in ramps] + [plan.meta.max_bias_volts, 0.0])
    rates = [r for _, _, r in ramps if r is not None]
    address = getattr(spec, "address", "?")
    what = ", ".join(plan.meta.hazards) if plan.meta.hazards else "bias"
    live = [f"{what} from the bias supply at {address}"]
    hardware = getattr(spec, "hardware_interlock", "")
    if hardware:  # the dialect cannot read the interlock: the operator vouches for the hardware
        live.append(
            f"the interlock is NOT read by software; it rests on the hardware interlock on the "
            f"supply's inhibit input declared in the bench file ({hardware}): acknowledge only "
            "if it is wired and tested"
        )
    return Caution(
        live=tuple(live),
        max_volts=max_v,
        max_ramp_V_per_s=max([*rates, plan.meta.max_ramp_V_per_s, 0.0]),
        steps=tuple(s.path for s in hazard_steps(plan)),
    )
