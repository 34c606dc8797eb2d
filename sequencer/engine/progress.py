"""Progress display: a subscriber with a rich bar (ETA from the plan's estimates, current step path).

On a terminal it animates; otherwise it prints nothing animated — one plain line every ``every``
steps and at the end (``every=0``: nothing at all).
"""

from __future__ import annotations

import sys
import time
from typing import IO, Any

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

from sequencer.events import Event, RunFinished, RunStarted, StepFinished, StepStarted
from sequencer.pace import describe_left, time_left
from sequencer.procedure.plan_model import Plan

DEFAULT_EVERY = 100


class ProgressDisplay:
    """Subscribe with ``runner(subscribers=[display, ...])``; ``close()`` when done (idempotent)."""

    def __init__(
        self,
        plan: Plan | None = None,
        *,
        stream: IO[str] | None = None,
        every: int = DEFAULT_EVERY,
        force_terminal: bool | None = None,
    ) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.console = Console(file=self.stream, force_terminal=force_terminal)
        self.every = every
        self.estimates = {s.path: s.estimate_s for s in plan.steps} if plan else {}
        self.total_estimate = sum(self.estimates.values())
        self.done = 0
        self.total = 0
        self._t0 = time.monotonic()
        self._bar: Progress | None = None
        self._task: Any = None

    @property
    def animated(self) -> bool:
        return self.console.is_terminal

    def __call__(self, event: Event) -> None:
        if isinstance(event, RunStarted):
            self._start(event)
        elif isinstance(event, StepStarted):
            self._step_started(event)
        elif isinstance(event, StepFinished):
            self._step_finished(event)
        elif isinstance(event, RunFinished):
            self._finish(event)

    def _start(self, event: RunStarted) -> None:
        self._t0 = time.monotonic()
        if not self.animated:
            return
        self._bar = Progress(
            TextColumn("{task.fields[path]}"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeRemainingColumn(),
            console=self.console,
            transient=False,
        )
        self._bar.start()
        total = self.total_estimate or None
        self._task = self._bar.add_task("run", total=total, path=f"run {event.run_id}")

    def _step_started(self, event: StepStarted) -> None:
        self.total = max(self.total, event.total)
        if self._bar is not None:
            if self.total_estimate == 0:
                self._bar.update(self._task, total=event.total)
            self._bar.update(self._task, path=event.path)

    def _step_finished(self, event: StepFinished) -> None:
        self.done += 1
        if self._bar is not None:
            step = self.estimates.get(event.path, 0.0) if self.total_estimate else 1.0
            self._bar.advance(self._task, step)
        elif self.every and self.done % self.every == 0:
            print(self.plain_line(event.path), file=self.stream, flush=True)

    def plain_line(self, path: str) -> str:
        """``300 of 840 steps done, about 2 min 10 s left at the pace so far; at PATH``."""
        if not self.total:
            return f"{self.done} steps done, at {path}"
        left = describe_left(time_left(self.done, self.total, time.monotonic() - self._t0))
        pace = f", {left} at the pace so far" if left else ""
        return f"{self.done} of {self.total} steps done{pace}; at {path}"

    def _finish(self, event: RunFinished) -> None:
        self.close()
        if not self.animated and self.every:
            tail = f": {event.reason}" if event.reason else ""
            print(
                f"run {event.run_id} {event.status} after {self.done} steps{tail}",
                file=self.stream,
                flush=True,
            )

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()
            self._bar = None
