"""The heartbeat of a running run: a thread that refreshes the run's lease in the store.

Composition-level (it calls the store; the engine knows nothing of it).  A lost lease (the run was
taken over with ``resume --take-over`` or ``safe --take-over``, or marked interrupted because no beat arrived in time) asks
the run to stop, like a signal: bias to its safe state, cleanup, exit 3.  A beat the store refuses
for another reason (a locked or full database) is counted and tried again at the next beat; the
run itself meets that fault when it records its next step.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from types import TracebackType

from sequencer.errors import StoreError


class Heartbeat:
    """``with Heartbeat(beat, on_lost, interval_s): ...`` beats every ``interval_s`` until exit."""

    def __init__(
        self, beat: Callable[[], bool], on_lost: Callable[[str], None], interval_s: float
    ) -> None:
        self._beat = beat
        self._on_lost = on_lost
        self.interval_s = interval_s
        self.beats = 0
        self.failures = 0
        self.last_error = ""
        self.lost = False
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="benchwright-heartbeat", daemon=True)

    def _loop(self) -> None:
        while not self._done.wait(self.interval_s):
            try:
                held = self._beat()
            except StoreError as exc:
                self.failures += 1
                self.last_error = str(exc)
                continue
            self.beats += 1
            if not held:
                self.lost = True
                self._on_lost(
                    "the run's lease was lost: another process took the run over "
                    "(resume --take-over, or safe --take-over of its bench) or marked it "
                    "interrupted"
                )
                return

    def __enter__(self) -> Heartbeat:
        self._thread.start()
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self._done.set()
        # bounded: a beat waiting on a locked database is not waited for beyond one interval
        self._thread.join(timeout=max(self.interval_s, 1.0))
