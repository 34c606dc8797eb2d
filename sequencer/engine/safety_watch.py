"""The interlock watcher and the link-drop helpers of the bias guard.

While a voltage may be live, a background thread reads the interlock and the trip every
``interlock_interval_s`` and turns what it sees into a stop request; the guard and the watcher both
notice a link the drivers had to reopen (the watch was blind for that time).
"""

from __future__ import annotations

import threading
from typing import TYPE_CHECKING, Any

from drivers.errors import BenchwrightError, TransportError

from .faults import describe_fault

if TYPE_CHECKING:
    from .safety import BiasGuard


def reconnects(role: Any) -> int:
    """How often the drivers reopened the link under a role driver (0 when unknown)."""
    count = getattr(getattr(role, "session", None), "reconnects", 0)
    return count if isinstance(count, int) else 0


def link_drop_reason(address: str) -> str:
    return f"bias at {address}: the link to the supply dropped while live (reopened by the drivers)"


def reconnect(role: Any) -> None:
    """Reconnect the transport under a role driver (bounded; raises TransportError on failure)."""
    session = getattr(role, "session", None)
    transport = getattr(session, "transport", None)
    if transport is None or not hasattr(transport, "reconnect"):
        raise TransportError("no way to reconnect", address=getattr(transport, "address", ""))
    transport.reconnect()


class Watcher:
    """Background reader of the interlock and trip while a voltage may be live."""

    def __init__(self, guard: BiasGuard, interval_s: float) -> None:
        self._guard = guard
        self._interval = interval_s
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="interlock-watch", daemon=True)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._done.set()
        self._thread.join(timeout=5.0)

    def _loop(self) -> None:
        g = self._guard
        stop = g.ctx.stop
        while not self._done.wait(self._interval):
            if not g.live:
                continue
            try:
                if g.interlock() is False:
                    stop.request("interlock", f"bias at {g.address}: interlock opened while live")
                    return
                if g.bias.tripped():
                    if not g.interlock_still_closed():  # it opened after it was read
                        stop.request(
                            "interlock", f"bias at {g.address}: interlock opened while live"
                        )
                        return
                    stop.request(
                        "trip",
                        f"bias at {g.address}: the supply tripped while live "
                        "(over-current or over-voltage protection)",
                    )
                    return
                if g.link_dropped():
                    stop.request("instrument", link_drop_reason(g.address))
                    return
            except BenchwrightError as exc:
                stop.request("instrument", describe_fault(exc, g.ctx.bench.spec.instruments))
                return
