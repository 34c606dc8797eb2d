"""The simulated bench's clock: the time a real bench would have taken, by kind.

Every simulated instrument of a bench shares one :class:`SimClock`.  An instrument *spends* time
on it for what the timing model (:mod:`drivers.timing`) says a real one takes: an acquisition, a
counter gate, a relay settling, a supply ramp (the waits the statistics demand), a message's round
trip or a block transfer (overhead).  The clock adds each up.  Off real time (unit tests, the
default) nothing waits: a qualification still runs in seconds and the clock says how long the real
bench would have taken.  With ``realtime`` the instrument really waits: :meth:`SimClock.spend`
returns how long, *less the time the simulator already spent computing* since the work began (a real
scope averages while it acquires; our simulator's CPU time must not be added on top of the physics).
"""

from __future__ import annotations

import threading
import time
from collections import defaultdict
from collections.abc import Callable

from drivers.timing import DEFAULT_TIMING, DEMANDED, OVERHEAD, BenchTiming

KINDS = DEMANDED + OVERHEAD


class SimClock:
    """Accounted bench time per kind; ``realtime``: instruments wait for it too."""

    def __init__(
        self,
        timing: BenchTiming = DEFAULT_TIMING,
        *,
        realtime: bool = False,
        now: Callable[[], float] = time.perf_counter,
    ) -> None:
        self.timing = timing
        self.realtime = realtime
        self._now = now
        self._lock = threading.Lock()
        self._seconds: dict[str, float] = defaultdict(float)
        self._counts: dict[str, int] = defaultdict(int)

    def spend(self, kind: str, seconds: float, *, since: float | None = None) -> float:
        """Account ``seconds`` of ``kind``; the seconds the caller must still wait (0 off real
        time).  ``since``: when the work began (:meth:`mark`), so time already spent counts."""
        if kind not in KINDS:
            raise ValueError(f"unknown kind of bench time {kind!r} (known: {', '.join(KINDS)})")
        took = max(0.0, float(seconds))
        with self._lock:
            self._seconds[kind] += took
            self._counts[kind] += 1
        if not self.realtime:
            return 0.0
        already = self._now() - since if since is not None else 0.0
        return max(0.0, took - already)

    def mark(self) -> float:
        """Now, for a later ``spend(..., since=mark)``."""
        return self._now()

    def seconds(self, kind: str | None = None) -> float:
        """Accounted seconds of ``kind``, or of every kind."""
        with self._lock:
            if kind is None:
                return sum(self._seconds.values())
            return self._seconds.get(kind, 0.0)

    def counts(self) -> dict[str, int]:
        with self._lock:
            return dict(self._counts)

    def demanded_s(self) -> float:
        """The waits the measurement statistics demand: acquisitions, gates, settles, ramps."""
        return sum(self.seconds(k) for k in DEMANDED)

    def overhead_s(self) -> float:
        """What the link costs: round trips and transfers."""
        return sum(self.seconds(k) for k in OVERHEAD)

    def breakdown(self) -> dict[str, float]:
        with self._lock:
            return {k: self._seconds.get(k, 0.0) for k in KINDS}
