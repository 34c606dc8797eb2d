"""Turn a computed figure into a judged ``Measurement`` (limit from the plan, verdict)."""

from __future__ import annotations

import math
from typing import Any

from sequencer.events import Measurement
from sequencer.procedure.coverage import DEFAULT_OUTPUT, output_of  # noqa: F401  (re-exported)
from sequencer.procedure.plan_model import PlannedStep
from sequencer.quantities import QUANTITY_UNITS as UNITS

from .context import RunContext

NO_FINITE_VALUE = "the analysis gave no finite value"


def channel_of(step: PlannedStep) -> int | None:
    value = step.labels.get("channel")
    return None if value is None else int(value)




def measure(
    ctx: RunContext,
    step: PlannedStep,
    quantity: str,
    value: float,
    *,
    uncertainty: float | None = None,
    channel: Any = "from-labels",
    output: Any = "from-labels",
    aggressor: int | None = None,
    reason: str = "",
) -> Measurement:
    """A ``Measurement`` of ``quantity`` judged against ``plan.limit_for(quantity, output)`` under
    that limit set's decision rule (``sequencer.procedure.decision``).

    ``reason``: why ``value`` is NaN (the analysis's refusal).  A non-finite value given without
    one is stored with :data:`NO_FINITE_VALUE`, so no missing value goes unexplained."""
    ch = channel_of(step) if channel == "from-labels" else channel
    out = output_of(step) if output == "from-labels" else output
    limit = ctx.plan.limit_for(quantity, out)
    value = float(value)
    if not math.isfinite(value) and not reason:
        reason = NO_FINITE_VALUE
    unc = None if uncertainty is None or not math.isfinite(uncertainty) else float(uncertainty)
    decision = None if limit is None else limit.decide(value, unc)
    return Measurement(
        quantity=quantity,
        value=value,
        unit=UNITS.get(quantity, limit.unit if limit else ""),
        uncertainty=unc,
        channel=ch,
        output=out,
        aggressor=aggressor,
        low=None if limit is None else limit.low,
        high=None if limit is None else limit.high,
        verdict="info" if decision is None else decision.verdict,
        qualifier="" if decision is None else decision.qualifier,
        reason="" if math.isfinite(value) else reason,
    )
