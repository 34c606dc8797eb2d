"""Text of a plan for ``benchwright plan``: the steps with paths, counts per kind, estimated duration."""

from __future__ import annotations

from collections import Counter
from typing import Any

from .kinds import CANONICAL_UNIT, KINDS
from .plan_model import Plan, PlannedStep
from .units import format_number


def format_duration(seconds: float) -> str:
    """``1 h 02 min 05 s``, ``3 min 20 s``, ``12.5 s``."""
    if seconds < 60:
        return f"{seconds:.1f} s"
    whole = round(seconds)
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours} h {minutes:02d} min {secs:02d} s"
    return f"{minutes} min {secs:02d} s"


def _value(value: Any, unit: str) -> str:
    if isinstance(value, tuple | list):
        return "[" + ", ".join(_value(v, "") for v in value) + "]"
    if isinstance(value, bool | int | float):
        text = format_number(value)
        return f"{text} {unit}" if unit else text
    return str(value)


def format_args(step: PlannedStep) -> str:
    """``mV=40 mV, channel=3``: arguments with their canonical units."""
    spec = KINDS[step.kind]
    parts = []
    for name, value in step.args.items():
        arg = spec.arg(name)
        unit = CANONICAL_UNIT.get(arg.dimension, "") if arg else ""
        parts.append(f"{name}={_value(value, unit)}")
    return ", ".join(parts)


def format_plan(plan: Plan) -> str:
    """The whole plan as text: header, one line per step, counts per kind and the estimate."""
    meta, board = plan.meta, plan.board
    lines = [
        f"procedure {meta.name} {meta.version}"
        + (f" ({plan.source_path})" if plan.source_path else ""),
        f"board {board.serial or '-'} of type {board.board_type}: {board.channels} channels, "
        f"outputs {', '.join(board.outputs)}",
        f"roles: {', '.join(meta.roles) or 'none'}; hazards: {', '.join(meta.hazards) or 'none'}",
    ]
    if meta.max_bias_volts:
        lines.append(
            f"bias: up to {format_number(meta.max_bias_volts)} V at up to {format_number(meta.max_ramp_V_per_s)} V/s"
        )
    width = max((len(s.path) for s in plan.steps), default=4)
    kind_width = max((len(s.kind) for s in plan.steps), default=4)
    lines.append("")
    lines.append(f"{'#':>5}  {'path':<{width}}  {'kind':<{kind_width}}  {'estimate':>9}  args")
    for i, step in enumerate(plan.steps, 1):
        mark = " !" if step.hazard else ""
        lines.append(
            f"{i:>5}  {step.path:<{width}}  {step.kind:<{kind_width}}  "
            f"{step.estimate_s:>7.3f} s  {format_args(step)}{mark}".rstrip()
        )
    lines.append("")
    lines.append("steps by kind:")
    counts = Counter(s.kind for s in plan.steps)
    seconds = Counter()
    for step in plan.steps:
        seconds[step.kind] += step.estimate_s
    for kind in sorted(counts):
        produces = KINDS[kind].produces
        extra = f"  -> {', '.join(produces)}" if produces else ""
        lines.append(
            f"  {kind:<{kind_width}}  {counts[kind]:>6}  {format_duration(seconds[kind]):>16}{extra}"
        )
    blocks = Counter(s.block for s in plan.steps)
    lines.append("")
    lines.append(
        f"{len(plan.steps)} steps (setup {blocks['setup']}, steps {blocks['main']}, "
        f"cleanup {blocks['cleanup']}); {len(plan.limits)} limits; "
        f"estimated duration {format_duration(plan.estimate_s)}"
    )
    return "\n".join(lines) + "\n"
