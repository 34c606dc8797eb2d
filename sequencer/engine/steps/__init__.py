"""Step handlers: one module per family, one table from kind name to handler.

A handler is ``(ctx: RunContext, step: PlannedStep) -> StepResult``.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import StepResult
from . import (
    analysis,
    bias,
    bipolar,
    coincidence,
    counter,
    digitizer,
    discriminator_timing,
    flow,
    module_analysis,
    pulser,
    scan,
    scope,
    sensor_analysis,
    sensors,
    shaper_adc,
    switch,
    threshold,
)

Handler = Callable[[RunContext, PlannedStep], StepResult]


def handler_table() -> Mapping[str, Handler]:
    """Every kind name of ``sequencer.procedure.kinds.KINDS`` mapped to its handler."""
    table: dict[str, Handler] = {}
    for family in (
        pulser, scope, threshold, counter, scan, coincidence, bias, switch, flow, analysis, sensors,
        sensor_analysis, module_analysis, digitizer, discriminator_timing, shaper_adc, bipolar,
    ):
        table.update(family.HANDLERS)
    return table
