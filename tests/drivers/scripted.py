"""A scripted transport: the fake at the edge for driver unit tests.

A script is an ordered list of exchanges ``(expected command, reply)``.  ``reply`` is ``None`` (nothing
comes back), bytes (one chunk), a list of bytes (several chunks, to split a reply over low-level
reads) or an exception instance (raised by ``write``, e.g. a dropped link).  Reading past the
available input raises :class:`InstrumentTimeout`, as a real link would after its timeout.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from drivers.errors import InstrumentTimeout

OK = b'0,"No error"\n'
ERRQ = "SYSTem:ERRor:NEXT?"


def configured(command: str) -> list[tuple[str, object]]:
    """A configuring command followed by an empty error-queue check."""
    return [(command, None), (ERRQ, OK)]


def resync() -> list[tuple[str, object]]:
    """What the session sends to get back in step (after ``drain``)."""
    return [("*CLS", None), ("*OPC?", b"1\n")]


@dataclass
class ScriptedTransport:
    script: list[tuple[str, object]] = field(default_factory=list)
    address: str = "SCRIPT::1"
    read_termination: str = "\n"
    timeout_ms: int = 5000
    reconnect_failures: int = 0
    writes: list[str] = field(default_factory=list)
    events: list[str] = field(default_factory=list)
    timeouts_at_write: list[int] = field(default_factory=list)
    chunks_read: int = 0
    closed: bool = False
    _input: list[bytes] = field(default_factory=list)

    def expect(
        self, *exchanges: tuple[str, object] | list[tuple[str, object]]
    ) -> ScriptedTransport:
        for item in exchanges:
            self.script.extend(item if isinstance(item, list) else [item])
        return self

    # -- the transport contract ----------------------------------------------------------------
    def write(self, text: str) -> None:
        assert not self.closed, "write after close"
        self.writes.append(text)
        self.events.append(f"write:{text}")
        self.timeouts_at_write.append(self.timeout_ms)
        assert self.script, f"unexpected command {text!r} (script finished)"
        expected, reply = self.script.pop(0)
        assert text == expected, f"sent {text!r}, script expected {expected!r}"
        if isinstance(reply, BaseException):
            raise reply
        if isinstance(reply, bytes):
            self._input.append(reply)
        elif isinstance(reply, list):
            self._input.extend(reply)

    def read(self) -> bytes:
        term = self.read_termination.encode()
        data = bytearray()
        while self._input:
            chunk = self._input.pop(0)
            self.chunks_read += 1
            data += chunk
            at = data.find(term)
            if at >= 0:
                rest = bytes(data[at + len(term) :])
                if rest:
                    self._input.insert(0, rest)
                return bytes(data[:at])
        raise InstrumentTimeout("no reply (scripted)", address=self.address)

    def read_bytes(self, n: int) -> bytes:
        data = bytearray()
        while len(data) < n and self._input:
            chunk = self._input.pop(0)
            self.chunks_read += 1
            take = n - len(data)
            data += chunk[:take]
            if len(chunk) > take:
                self._input.insert(0, chunk[take:])
        if len(data) < n:
            raise InstrumentTimeout(
                f"expected {n} bytes, got {len(data)} (scripted)", address=self.address
            )
        return bytes(data)

    def more_pending(self, wait_s: float = 0.005) -> bool:
        return any(self._input)

    def drain(self) -> None:
        self.events.append("drain")
        self._input.clear()

    def reconnect(self) -> None:
        self.events.append("reconnect")
        self._input.clear()
        if self.reconnect_failures > 0:
            self.reconnect_failures -= 1
            from drivers.errors import ConnectionRefused

            raise ConnectionRefused("reconnect failed (scripted)", address=self.address)

    def close(self) -> None:
        self.closed = True
        self.events.append("close")

    # -- checks ----------------------------------------------------------------------------------
    def assert_done(self) -> None:
        assert not self.script, f"commands never sent: {[c for c, _ in self.script]}"
