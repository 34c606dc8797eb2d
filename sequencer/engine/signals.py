"""SIGINT/SIGTERM become a stop request while a run executes (handlers restored afterwards)."""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from types import FrameType

from .context import StopFlag

STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM)


@contextmanager
def stop_on_signals(stop: StopFlag, *, enabled: bool = True) -> Iterator[None]:
    """Within the block SIGINT and SIGTERM request a stop (cause ``signal``) instead of killing the
    process mid-exchange; the runner stops at the next safe point and runs the cleanup.  Only in
    the main thread (Python delivers signals there); elsewhere a no-op."""
    if not enabled or threading.current_thread() is not threading.main_thread():
        yield
        return

    def _request(signum: int, _frame: FrameType | None) -> None:
        stop.request("signal", f"stopped by {signal.Signals(signum).name}")

    previous = {s: signal.signal(s, _request) for s in STOP_SIGNALS}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)
