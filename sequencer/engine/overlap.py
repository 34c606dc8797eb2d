"""An analysis computes while the next instrument steps run; its record still comes first.

On a real bench an analysis (an S-curve's fit, a pulse's onset fit: up to ~100 ms each) leaves
every instrument idle.  The runner therefore starts an ``analyse.*`` step on one worker thread and
goes on with the steps after it that cannot depend on it (:func:`may_overlap`: settings, gates,
captures and waits, which read nothing the analysis produces), *holding* their results.  The
analysis is joined (:meth:`Overlap.take`) before the first step that could depend on it (another
analysis, a setting that follows a measured baseline, anything touching the bias, a resumed step,
the cleanup) or as soon as it is done; only then are its events published, followed by the held
steps' events in plan order.  So the events, the context and the store see exactly the sequence of
a run that waited for every analysis; only the steps' timestamps overlap.

Errors stay at their step: an analysis that raises is reported at the analysis (the held steps
after it are dropped, as they would never have run); an instrument step that raises while an
analysis is held is reported at that step, after the analysis and the steps before it are
published (an abort loses nothing that was measured).  The stop flag is looked at before every
step as usual; an analysis is pure computation and always finishes.

A one-worker ``ThreadPoolExecutor`` from the standard library runs the analyses.
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from datetime import datetime

from sequencer.procedure.plan_model import PlannedStep

from .records import StepResult

#: Step kinds whose handlers use only the bench and their own arguments (never the context's
#: traces, readings or measurements), so they may run while an analysis computes.
INDEPENDENT_KINDS = frozenset({
    "pulser.amplitude", "pulser.output", "pulser.rate", "pulser.shape",
    "counter.gate", "counter.count", "counter.scan", "threshold.level",
    "switch.inject", "switch.route", "switch.open_all",
    "scope.timebase", "scope.average", "scope.trigger", "scope.capture",
    "wait",
})  # fmt: skip


def defers(step: PlannedStep) -> bool:
    """Whether ``step`` is an analysis the runner may compute on the worker."""
    return step.kind.startswith("analyse.") and step.block != "cleanup"


def may_overlap(step: PlannedStep) -> bool:
    """Whether ``step`` may run while an analysis is computing (see :data:`INDEPENDENT_KINDS`; a
    ``scope.input`` only when it does not follow a measured baseline)."""
    if step.block == "cleanup":
        return False
    if step.kind == "scope.input":
        return not step.args.get("follow_baseline")
    return step.kind in INDEPENDENT_KINDS


@dataclass
class Held:
    """A step run but not yet published: the analysis (``future``) or a step after it."""

    step: PlannedStep
    index: int
    started: datetime
    result: StepResult | None = None  # None: it raised (announced, never finished)
    finished: datetime | None = None
    future: Future[tuple[StepResult, datetime]] | None = None


class Overlap:
    """The held steps of one run and the worker that computes their analysis."""

    def __init__(self) -> None:
        self.held: list[Held] = []
        self._worker: ThreadPoolExecutor | None = None

    def __bool__(self) -> bool:
        return bool(self.held)

    def start(self, item: Held, compute: Callable[[], tuple[StepResult, datetime]]) -> None:
        """Hold ``item`` (an analysis) and compute it on the worker."""
        if self._worker is None:
            self._worker = ThreadPoolExecutor(max_workers=1, thread_name_prefix="analysis")
        item.future = self._worker.submit(compute)
        self.held.append(item)

    def done(self) -> bool:
        """Whether the held analysis has finished computing."""
        future = self.held[0].future if self.held else None
        return future is not None and future.done()

    def take(self) -> list[Held]:
        """The held steps, in plan order, once the analysis has finished (its result filled in;
        its exception raised, the held steps dropped)."""
        held, self.held = self.held, []
        if held and held[0].future is not None:
            held[0].result, held[0].finished = held[0].future.result()
        return held

    def close(self) -> None:
        """Stop the worker (after the analysis it may be computing)."""
        if self._worker is not None:
            self._worker.shutdown(wait=True)
            self._worker = None
