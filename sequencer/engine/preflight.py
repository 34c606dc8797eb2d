"""Checks of a plan against a bench before anything moves (the CLI turns problems into exit 2)."""

from __future__ import annotations

from typing import Any

from drivers.errors import Location, Problem
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import Plan, PlannedStep

from .records import Caution


def is_hazard(step: PlannedStep) -> bool:
    """True when the step can make a voltage live (declared on the step or by its kind)."""
    kind = KINDS.get(step.kind)
    return step.hazard or (kind is not None and kind.hazard)


def hazard_steps(plan: Plan) -> list[PlannedStep]:
    """The steps of ``plan`` that can make a voltage live, in order (:func:`is_hazard` for each;
    the kinds are looked at once, not once per step: it runs before every run)."""
    kinds = {name for name, kind in KINDS.items() if kind.hazard}
    return [s for s in plan.steps if s.hazard or s.kind in kinds]


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
    """The messages of :func:`bench_problems` (empty = fine)."""
    return [p.message for p in bench_problems(plan, bench_spec)]


def bench_problems(plan: Plan, bench_spec: Any) -> list[Problem]:
    """Problems that forbid running ``plan`` on the bench described by ``bench_spec``, located.

    Checks that every step's kind is known and its role is on the bench, that a procedure with a
    hazard has a bias role, and that every requested voltage, ramp rate and current limit is within
    the bench file's ``max_volts``, ``max_ramp_V_per_s`` and ``max_current_uA``.  A missing role is
    located at the bench file's ``instruments:`` key, a limit at its key in the bench file (the
    message names the step and where it stands in the procedure); empty = fine.
    """
    instruments = bench_spec.instruments
    name = getattr(bench_spec, "name", "") or "the bench"
    problems: list[Problem] = []
    missing: dict[str, list[PlannedStep]] = {}
    for step in plan.steps:
        kind = KINDS.get(step.kind)
        if kind is None:
            problems.append(
                Problem(_step_place(plan, step), f"step {step.path}: unknown step kind {step.kind!r}")
            )
        elif kind.role is not None and kind.role not in instruments:
            missing.setdefault(kind.role, []).append(step)
    for role, steps in missing.items():
        problems.append(
            Problem(
                _bench_place(bench_spec, otherwise=_step_place(plan, steps[0])),
                f"role {role!r} is not on bench {name!r} but {len(steps)} step(s) need it "
                f"(first {steps[0].path}{_at(steps[0])}): add '{role}:' under instruments:",
            )
        )
    hazards = hazard_steps(plan)
    if (hazards or plan.meta.hazards) and "bias" not in instruments:
        if "bias" not in missing:
            problems.append(
                Problem(
                    _bench_place(bench_spec),
                    f"the procedure declares a hazard but bench {name!r} has no bias role",
                )
            )
        return problems
    if "bias" in instruments:
        problems.extend(_bias_limits(plan, bench_spec, instruments["bias"]))
    return problems


def _bench_place(
    bench_spec: Any,
    role: str | None = None,
    key: str | None = None,
    *,
    otherwise: Location | None = None,
) -> Location:
    """Where in the bench file; a bench with no file (the simulated one) points at ``otherwise``
    (the step) when given, rather than at a made-up ``<simulated bench>:1:1``."""
    where = getattr(bench_spec, "where", None)
    if callable(where) and getattr(bench_spec, "locations", None):
        return where(role, key)
    if otherwise is not None:
        return otherwise
    return Location(getattr(bench_spec, "source", "<bench>"), 1, 1)


def _step_place(plan: Plan, step: PlannedStep) -> Location:
    return step.location or Location(plan.source_path or "<procedure>", 1, 1)


def _at(step: PlannedStep) -> str:
    """`` at proc.yaml:12:7`` when the step's place is known."""
    return f" at {step.location}" if step.location is not None else ""


def _bias_limits(plan: Plan, bench_spec: Any, spec: Any) -> list[Problem]:
    max_v = getattr(spec, "max_volts", None)
    max_rate = getattr(spec, "max_ramp_V_per_s", None)
    max_i = getattr(spec, "max_current_uA", None)
    problems: list[Problem] = []

    def at(key: str, message: str, step: PlannedStep | None = None) -> None:
        otherwise = None if step is None else _step_place(plan, step)
        problems.append(Problem(_bench_place(bench_spec, "bias", key, otherwise=otherwise), message))

    ramps = requested_ramps(plan, max_rate)
    if ramps and max_v is None:
        at("max_volts", "bench bias has no max_volts: refusing to ramp without a voltage limit")
    if ramps and max_rate is None:
        at(
            "max_ramp_V_per_s",
            "bench bias has no max_ramp_V_per_s: refusing to ramp without a rate limit",
        )
    for step, volts, rate in ramps:
        if max_v is not None and abs(volts) > max_v:
            at(
                "max_volts",
                f"step {step.path}{_at(step)}: {volts:g} V exceeds the bench limit {max_v:g} V "
                "(max_volts; lower the step's volts, raise the limit only if the supply, cabling "
                "and device are rated for it and your lab's safety rules allow it)",
                step,
            )
        if rate is not None and max_rate is not None and rate > max_rate:
            at(
                "max_ramp_V_per_s",
                f"step {step.path}{_at(step)}: ramp rate {rate:g} V/s exceeds the bench limit "
                f"{max_rate:g} V/s (max_ramp_V_per_s)",
                step,
            )
        if rate is not None and rate <= 0:
            problems.append(
                Problem(
                    _step_place(plan, step),
                    f"step {step.path}: ramp rate must be positive, got {rate:g} V/s",
                )
            )
    if max_v is not None and plan.meta.max_bias_volts > max_v:
        at(
            "max_volts",
            f"the procedure requests up to {plan.meta.max_bias_volts:g} V, above the bench "
            f"limit {max_v:g} V (max_volts)",
        )
    if max_rate is not None and plan.meta.max_ramp_V_per_s > max_rate:
        at(
            "max_ramp_V_per_s",
            f"the procedure ramps at up to {plan.meta.max_ramp_V_per_s:g} V/s, above the bench "
            f"limit {max_rate:g} V/s (max_ramp_V_per_s)",
        )
    for step in plan.steps:
        if step.kind == "bias.limit" and max_i is not None:
            current = float(step.args["current"])
            if current > max_i:
                at(
                    "max_current_uA",
                    f"step {step.path}{_at(step)}: current limit {current:g} uA exceeds the bench "
                    f"limit {max_i:g} uA (max_current_uA)",
                    step,
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
