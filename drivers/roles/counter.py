"""Counter: counts of a board discriminator output during a gate."""

from __future__ import annotations

from typing import TYPE_CHECKING

from drivers.dialect import Dialect
from drivers.roles.base import RoleDriver, check_range
from drivers.scpi.joined import query_joined
from drivers.scpi.replies import parse_reply
from drivers.scpi.session import ScpiSession

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec

#: Extra time allowed on top of the gate before a count query times out (ms).
GATE_MARGIN_MS = 2000


class Counter(RoleDriver):
    """Gate time in seconds; ``count`` waits for the gate, so its query timeout exceeds it."""

    role = "counter"

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        super().__init__(session, dialect, spec)
        self._gate_s: float | None = None

    def set_gate(self, seconds: float) -> None:
        gate = check_range("seconds", seconds, 0.0, 3600.0)
        if gate <= 0:
            raise ValueError("seconds must be above 0")
        self._write("set_gate_time", seconds=gate)
        self._gate_s = gate

    def gate_s(self) -> float:
        if self._gate_s is None:
            self._gate_s = float(self._query("get_gate_time"))
        return self._gate_s

    def count(self, channel: int) -> int:
        """Select ``channel``, start one gate and return its total count."""
        if int(channel) != channel or channel < 1:
            raise ValueError(f"channel={channel!r} must be a channel number from 1")
        with self.session.lock:
            timeout_ms = int(self.gate_s() * 1000) + max(
                GATE_MARGIN_MS, self.session.transport.timeout_ms
            )
            if self._joins_count():  # start, count and error check: one message
                self._write("select_channel", channel=int(channel))
                counts = self.dialect.operation("counter", "counts")
                rule = (counts.single.reply if counts.single else None) or counts.reply
                return int(
                    query_joined(
                        self.session, [self._command("start")], self._command("counts"),
                        lambda r: parse_reply(r, counts.returns or "int", rule),
                        timeout_ms=counts.timeout_ms or timeout_ms,
                    )
                )  # fmt: skip
            with self.session.group():
                self._write("select_channel", channel=int(channel))
                self._write("start", reapply=False)
            return int(self._query("counts", timeout_ms=timeout_ms))

    def _joins_count(self) -> bool:
        """Whether the dialect lets the gate's start, the count and the error check share a message:
        joining allowed, both operations one plain command each, errors checked after the start."""
        d = self.dialect
        start, counts = d.operation("counter", "start"), d.operation("counter", "counts")
        return (
            self.session.policy.join
            and self.session.check_errors
            and start.single is not None
            and counts.single is not None
            and counts.single.action == "query"
            and start.check_errors is not False
        )

    def rate_hz(self, channel: int) -> float:
        """Counts per second over one gate."""
        return self.count(channel) / self.gate_s()
