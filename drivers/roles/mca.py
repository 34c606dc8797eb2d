"""Pulse-height analyser (multichannel analyser): a histogram of one input's pulse heights over a
number of triggers."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from drivers.errors import ProtocolError
from drivers.roles.base import RoleDriver, check_range, check_word

MAX_EVENTS = 10_000_000
#: Extra time allowed for an acquisition on top of the triggers at the expected rate (ms).
ACQUIRE_MARGIN_MS = 5000


@dataclass(frozen=True)
class HeightHistogram:
    """Counts per bin of equal width between ``lower_mV`` and ``upper_mV``, and the events outside."""

    lower_mV: float
    upper_mV: float
    counts: np.ndarray
    below: int
    above: int

    @property
    def edges_mV(self) -> np.ndarray:
        return np.linspace(self.lower_mV, self.upper_mV, self.counts.size + 1)

    @property
    def events(self) -> int:
        return int(self.counts.sum()) + self.below + self.above


class Mca(RoleDriver):
    """Range in mV, bins, triggers per acquisition; ``acquire`` returns a :class:`HeightHistogram`."""

    role = "mca"

    def set_range(self, *, lower_mV: float, upper_mV: float, bins: int) -> None:
        lo = check_range("lower_mV", lower_mV, -10_000.0, 10_000.0)
        hi = check_range("upper_mV", upper_mV, -10_000.0, 10_000.0)
        if hi <= lo:
            raise ValueError(f"upper_mV ({hi:g}) must exceed lower_mV ({lo:g})")
        n = int(check_range("bins", bins, 16, 16384))
        self._write("set_lower", volts=lo * 1e-3)
        self._write("set_upper", volts=hi * 1e-3)
        self._write("set_bins", count=n)

    def set_trigger(self, source: str) -> None:
        self._write("set_trigger_source", source=check_word("source", source))

    def acquire(self, channel: int, events: int, *, expected_s: float = 0.0) -> HeightHistogram:
        """Histogram ``events`` triggers of input ``channel``; waits for the acquisition
        (``expected_s``: how long it should take, added to the reply timeout)."""
        if int(channel) != channel or channel < 1:
            raise ValueError(f"channel={channel!r} must be an input number from 1")
        n = int(check_range("events", events, 1, MAX_EVENTS))
        with self.session.lock:
            self._write("set_channel", channel=int(channel))
            self._write("set_events", count=n)
            self._write("start", reapply=False)
            timeout = int(expected_s * 1000) + max(
                ACQUIRE_MARGIN_MS, self.session.transport.timeout_ms
            )
            counts = np.asarray(self._query("fetch", timeout_ms=timeout), dtype=np.float64)
            outside = self._query("outside")
            lower = float(self._query("get_lower")) * 1e3
            upper = float(self._query("get_upper")) * 1e3
        if len(outside) != 2 or counts.size < 1:
            raise ProtocolError(
                "pulse-height analyser gave a malformed histogram", address=self.address
            )
        whole = np.all(np.isfinite(counts)) and np.all(counts == np.round(counts))
        if not whole or np.any(counts < 0):
            raise ProtocolError("histogram counts are not whole numbers >= 0", address=self.address)
        total = int(counts.sum()) + int(outside[0]) + int(outside[1])
        if total != n:
            raise ProtocolError(
                f"histogram holds {total} events, {n} were asked for (stale data?)",
                address=self.address,
            )
        return HeightHistogram(
            lower_mV=lower,
            upper_mV=upper,
            counts=counts.astype(np.int64),
            below=int(outside[0]),
            above=int(outside[1]),
        )
