"""A plan's durations taken from a past run (``benchwright plan --timing-from RUN_ID``).

The rule-of-thumb estimate (sequencer/procedure/estimate.py) assumes a LAN bench; a run already
recorded on the bench in question knows better.  Each planned step whose path that run completed
takes the time it took then; the other steps keep their estimate.  Paths do not hold the board's
serial, so a run of another board of the same type times this one.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from datetime import datetime

from sequencer.procedure.plan_model import Plan
from sequencer.store import Store


@dataclass(frozen=True, kw_only=True)
class PastTiming:
    """Where a plan's durations came from."""

    run_id: int
    procedure: str
    bench: str
    board: str
    started_at: datetime
    matched: int  # planned steps timed by the run
    total: int  # planned steps

    def describe(self) -> str:
        when = self.started_at.strftime("%Y-%m-%d %H:%M")
        rest = "" if self.matched == self.total else "; the others estimated"
        return (
            f"durations of {self.matched} of {self.total} steps from run {self.run_id} "
            f"({self.procedure} on {self.bench}, board {self.board}, {when}){rest}"
        )


def time_by_run(plan: Plan, store: Store, run_id: int) -> tuple[Plan, PastTiming]:
    """``plan`` with each step completed in run ``run_id`` taking the time it took then."""
    run = store.get_run(run_id)
    took = {
        s.path: max(0.0, (s.finished_at - s.started_at).total_seconds())
        for s in store.steps(run_id)
        if s.status == "completed"
    }
    steps = tuple(
        dataclasses.replace(s, estimate_s=took[s.path]) if s.path in took else s
        for s in plan.steps
    )
    timing = PastTiming(
        run_id=run_id,
        procedure=run.procedure,
        bench=run.bench,
        board=run.board,
        started_at=run.started_at,
        matched=sum(s.path in took for s in plan.steps),
        total=len(plan.steps),
    )
    return dataclasses.replace(plan, steps=steps), timing
