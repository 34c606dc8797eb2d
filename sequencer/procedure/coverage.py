"""Limits a plan cannot apply: a quantity the limit set limits, measured by a step whose labels lack
the keys its limit needs (typically an output routed without ``for_outputs`` while the limit set
limits the quantity per output).  Such a value would be stored unjudged (verdict ``info``); ``validate``,
``plan`` and ``run`` say so before anything is measured.
"""

from __future__ import annotations

from .kinds import KINDS
from .plan_model import Plan, PlannedStep

DEFAULT_OUTPUT: dict[str, str] = {
    "analyse.s_curve": "x1",
    "analyse.discriminator": "x1",
    "analyse.peaking": "shaped",
}
"""Output a kind's measurements belong to when the step's labels do not name one."""


def output_of(step: PlannedStep) -> str | None:
    """The output a step's measurements belong to (its labels, else the kind's default), or None."""
    value = step.labels.get("output", DEFAULT_OUTPUT.get(step.kind))
    return None if value is None else str(value)


def unjudged_warnings(plan: Plan) -> list[str]:
    """One line per (quantity, reason) a limit exists for but no limit will match, with the first
    step path where it happens and how many steps do."""
    limited = {lim.quantity for lim in plan.limits}
    found: dict[tuple[str, str | None], list[str]] = {}
    for step in plan.steps:
        spec = KINDS.get(step.kind)
        if spec is None:
            continue
        out = output_of(step)
        for quantity in spec.produces:
            if quantity in limited and plan.limit_for(quantity, out) is None:
                found.setdefault((quantity, out), []).append(step.path)
    lines = []
    for (quantity, out), paths in found.items():
        outputs = sorted({str(lim.output) for lim in plan.limits if lim.quantity == quantity})
        if out is None:
            why = (f"without an output, but the limit set limits it only per output "
                   f"({', '.join(outputs)}): put the step inside for_outputs")
        else:
            why = f"on output {out}, which the limit set has no {quantity} limit for ({', '.join(outputs)})"
        more = f" (and {len(paths) - 1} more step(s))" if len(paths) > 1 else ""
        lines.append(f"{paths[0]}{more}: {quantity} is measured {why}; it will go unjudged")
    return lines
