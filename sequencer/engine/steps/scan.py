"""Handler of ``counter.scan``: an S-curve that places its own thresholds (adaptive).

The planner (:class:`sequencer.analysis.adaptive.AdaptiveSCurve`) proposes a threshold, this handler
sets it on the threshold DAC and counts one gate, until the fit's uncertainties reach the targets or
the gate budget is spent; the run's stop flag is looked at before every gate.  The gates are kept
as one reading ``into`` (``{"x": [mV...], "fired": [...]}``, signed like the output) that
``analyse.s_curve`` and ``analyse.discriminator`` read like the counts of a fixed sweep.
On a negative-going x1 output the planner works on mirrored thresholds (it expects the efficiency
to fall as the threshold rises) and the DAC gets them mirrored back.
"""

from __future__ import annotations

from sequencer.analysis.adaptive import AdaptiveSCurve, ScanTargets
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..records import StepResult
from .refusing import polarity


def scan_s_curve(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    channel = int(a["channel"])
    sign = polarity(ctx, "x1")
    targets = ScanTargets(mu_mV=float(a["target"]), sigma_mV=float(a["target_sigma"]),
                          max_gates=int(a["max_gates"]), coarse=int(a["coarse"]))  # fmt: skip
    plan = AdaptiveSCurve(centre_mV=sign * float(a["centre"]), window_mV=float(a["window"]),
                          trials=int(a["trials"]), targets=targets)  # fmt: skip
    while (x := plan.next_threshold()) is not None:
        ctx.checkpoint()
        ctx.bench.threshold.set_level(channel, sign * x)
        plan.add(x, int(ctx.bench.counter.count(channel)))
    reading = {"x": [sign * v for v in plan.x], "fired": list(plan.fired)}
    results = {"readings": {a["into"]: reading}, "gates": plan.gates, "stopped": plan.stopped}
    return StepResult(results={**results, "target_reached": plan.reached})


HANDLERS = {"counter.scan": scan_s_curve}
