"""The link the SCPI layer speaks over: the transport contract, as a typing ``Protocol``.

``drivers.transport.VisaTransport`` is the real one; the tests' scripted transports are others.
``wait_for_input(timeout_s) -> bool | None`` is optional (looked up with ``getattr``): a link that
has it lets long waits look at the run's stop flag between short slices.
"""

from __future__ import annotations

from typing import Protocol


class Transport(Protocol):
    """What the SCPI layer needs from a link (``drivers.transport.VisaTransport`` or a test script)."""

    address: str
    timeout_ms: int

    @property
    def read_termination(self) -> str: ...
    def write(self, text: str) -> None: ...
    def read(self) -> bytes: ...
    def read_bytes(self, n: int) -> bytes: ...
    def more_pending(self, wait_s: float = ...) -> bool: ...
    def drain(self) -> None: ...
    def reconnect(self) -> None: ...
    def close(self) -> None: ...
