"""Recording a run one step behind: the store writes step N while the bench runs step N+1.

A completed step is one transaction (``recording.py``), committed with ``synchronous=FULL``: a few
milliseconds of SQL and an fsync per step, in the runner's thread a second or more of a board's
qualification spent with every instrument idle.  :class:`WriteBehind` hands the events to the
store's ``handle`` on one writer thread instead, in the order they were emitted, so that the
write overlaps the next step's instrument waits (the fsync and the waits both release the GIL).

What it keeps of the synchronous subscriber:

* **order**: one thread, one FIFO queue: the store sees exactly the sequence the runner emitted;
* **a few steps behind at most**: a ``StepFinished`` waits while :data:`MAX_BEHIND` steps are
  still unwritten, so a hard kill loses at most those (a resume runs them again, like a step that
  had not finished).  Not one: a qualification has bursts of a dozen settings of a millisecond
  each (a crosstalk set-up) while a step's commit takes 3-6 ms on a loaded machine; the writes
  catch up during the next long wait (a counter gate, an acquisition, a ramp).  With 8 the runner
  still waited 0.9 s per board for the writer, with 32 0.4 s (load 10);
* **at once where it matters**: a ``SafetyEvent`` and the ``RunFinished`` return only once they
  (and everything before them) are written, as before;
* **failures reach the runner**: an error of the store is raised by the next call (once), its
  message naming the event and step it failed on (``Store.handle`` words it so); the events after
  it are still delivered, as a synchronous subscriber would have received them;
* **nothing lost on the way out**: :meth:`close` (the context's exit) writes what is queued.

A small thread and a deque rather than ``concurrent.futures``: a single worker, with the
one-step-behind wait and the failure hand-back, is less code here than adapting an executor to it.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable
from types import TracebackType
from typing import Self

from sequencer.errors import StoreError
from sequencer.events import Event, RunFinished, SafetyEvent, StepFinished

#: How long a flush waits for the writer before it gives up.  One write waits at most the store's
#: busy timeout (another writer holding the database); a minute is far beyond that.
FLUSH_DEADLINE_S = 60.0
#: Completed steps that may wait to be written (see the module docstring).
MAX_BEHIND = 32


class WriteBehind:
    """A subscriber that delivers events to ``handle`` on a writer thread (see the module)."""

    def __init__(
        self, handle: Callable[[Event], None], *, deadline_s: float = FLUSH_DEADLINE_S,
        max_behind: int = MAX_BEHIND,
    ) -> None:  # fmt: skip
        self._handle = handle
        self._deadline_s = deadline_s
        self._max_behind = max(1, int(max_behind))
        self._steps = 0  # StepFinished events queued or being written
        self._queue: deque[Event] = deque()
        self._cond = threading.Condition()
        self._busy = False
        self._closing = False
        self._failure: BaseException | None = None
        self._thread = threading.Thread(target=self._work, name="store-writer", daemon=True)
        self._thread.start()

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.close(raise_failure=kind is None)

    def __call__(self, event: Event) -> None:
        step = isinstance(event, StepFinished)
        if step:
            self._wait(lambda: self._steps < self._max_behind)
        with self._cond:
            if self._closing:
                raise StoreError(
                    "the store's writer is closed: the run's events can no longer be recorded"
                )
            self._queue.append(event)
            self._steps += step
            self._cond.notify_all()
        if isinstance(event, SafetyEvent | RunFinished):
            self.flush(raise_failure=False)
        self._raise_failure()

    def flush(self, *, raise_failure: bool = True) -> None:
        """Return once every queued event is written (StoreError past the deadline)."""
        self._wait(lambda: not self._queue and not self._busy)
        if raise_failure:
            self._raise_failure()

    def _wait(self, done: Callable[[], bool]) -> None:
        """Wait (under the lock) until ``done()``; StoreError past the deadline or without writer."""
        deadline = time.monotonic() + self._deadline_s
        with self._cond:
            while not done():
                left = deadline - time.monotonic()
                if left <= 0 or not self._thread.is_alive():
                    raise StoreError(
                        f"the store's writer did not record {len(self._queue)} queued event(s) "
                        f"within {self._deadline_s:g} s"
                    )
                self._cond.wait(min(left, 0.5))

    def close(self, *, raise_failure: bool = True) -> None:
        """Write what is queued, then stop the writer (idempotent)."""
        try:
            self.flush(raise_failure=False)
        finally:
            with self._cond:
                self._closing = True
                self._cond.notify_all()
            self._thread.join(timeout=self._deadline_s)
        if raise_failure:
            self._raise_failure()

    def _raise_failure(self) -> None:
        with self._cond:
            failure, self._failure = self._failure, None
        if failure is not None:
            raise failure

    def _work(self) -> None:
        while True:
            with self._cond:
                while not self._queue and not self._closing:
                    self._cond.wait()
                if not self._queue:
                    return
                event = self._queue.popleft()
                self._busy = True
            try:
                self._handle(event)
            except BaseException as exc:  # handed to the runner's thread by the next call
                with self._cond:
                    self._failure = self._failure or exc
            finally:
                with self._cond:
                    self._busy = False
                    self._steps -= isinstance(event, StepFinished)
                    self._cond.notify_all()
