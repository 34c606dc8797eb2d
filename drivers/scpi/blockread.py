"""Reading an IEEE 488.2 arbitrary block off a link, bounded in size and in time.

A scope that sends an endless ``#0`` block, a flood of newlines or a header announcing 512 MiB must
not hold a run (and a live bias) hostage, nor allocate what it announces:

* **size**: the block may not exceed a cap -- the expected record (points x width) plus a margin
  when the caller knows it, else a hard cap (smaller for ``#0`` blocks, whose end is only a guess);
* **time**: a deadline of the link timeout plus the size over a transfer-rate floor; each chunk's
  own wait is cut to what is left of it;
* **stop**: a callable (the run's stop flag, handed down by the engine -- this layer imports
  nothing above it) is looked at between chunks and raises :class:`ReadStopped`;
* **memory**: the buffer grows with the data received, one chunk at a time, never to the size a
  header announces.

Used by :class:`drivers.scpi.session.ScpiSession`; the transport contract is the session's.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from drivers.errors import InstrumentTimeout, ProtocolError, ReadStopped, TransportError
from drivers.scpi.blocks import MAX_BLOCK_BYTES, parse_block_header

#: An indefinite (``#0``) block of unknown expected size may not exceed this (64 MiB: a 32 M-point
#: int16 record; a longer record should come as a definite block).
MAX_INDEFINITE_BYTES = 64 * 1024 * 1024
#: Slowest transfer a block read waits for (bytes/s) beyond the link timeout.  Common practice: LAN,
#: USBTMC and HS488 instruments sustain several MB/s; 1 MB/s leaves room for a slow one.
DEFAULT_MIN_TRANSFER_BPS = 1_000_000
#: Bytes asked of the link per chunk; the stop flag and the deadline are looked at between chunks.
DEFAULT_BLOCK_CHUNK = 256 * 1024
#: While no data arrives, a block read looks at the stop flag this often (seconds).
STOP_SLICE_S = 0.1
#: Allowance above the expected record: a few header or padding bytes, never another record.
EXPECTED_MARGIN_BYTES = 1024
EXPECTED_MARGIN_FRACTION = 0.01

StopCheck = Callable[[], bool]


@dataclass(frozen=True, kw_only=True)
class BlockBounds:
    """Limits of one block read."""

    cap_bytes: int
    timeout_s: float
    min_transfer_Bps: float = DEFAULT_MIN_TRANSFER_BPS
    chunk_bytes: int = DEFAULT_BLOCK_CHUNK
    stop: StopCheck | None = None

    def deadline(self, nbytes: int, start: float) -> float:
        """When a transfer of ``nbytes`` begun at ``start`` (monotonic seconds) must be done."""
        return start + self.timeout_s + nbytes / self.min_transfer_Bps


def block_cap(
    expected_bytes: int | None, *, indefinite: bool, hard_cap: int = MAX_BLOCK_BYTES
) -> int:
    """The largest block accepted: the expected size plus a margin, else the hard cap (the
    smaller ``MAX_INDEFINITE_BYTES`` for a ``#0`` block)."""
    limit = min(hard_cap, MAX_INDEFINITE_BYTES) if indefinite else hard_cap
    if expected_bytes is None or expected_bytes <= 0:
        return limit
    margin = EXPECTED_MARGIN_BYTES + int(expected_bytes * EXPECTED_MARGIN_FRACTION)
    wanted = int(expected_bytes) + margin
    return wanted if wanted < limit else limit  # not min(): once per block


class BlockReader:
    """One block reply read from ``transport`` within ``bounds`` (a fresh reader per reply)."""

    def __init__(
        self,
        transport: Any,
        bounds: BlockBounds,
        *,
        command: str = "",
        expected_bytes: int | None = None,
    ) -> None:
        self.transport = transport
        self.bounds = bounds
        self.command = command
        self.expected_bytes = expected_bytes
        self.start = time.monotonic()
        #: The link's wait for input (optional in the contract), looked up once per reply; None
        #: when nobody can ask to stop (then the reads wait in one piece, up to their timeout).
        self._wait: Callable[[float], bool | None] | None = (
            getattr(transport, "wait_for_input", None) if bounds.stop is not None else None
        )

    # -- the reply ------------------------------------------------------------------------------
    def header(self) -> int | None:
        """Read ``#<n><len>`` (a little whitespace before it is skipped); the declared length or
        None for ``#0``.  The wait for it -- the instrument acquiring, often the longest part --
        is sliced like the data's, so a stop request is seen while the instrument is silent."""
        self._await_data(0, None, self.bounds.deadline(0, self.start))
        head = self.transport.read_bytes(2)
        if head[:1] != b"#":  # tolerate a little whitespace before '#'
            for _ in range(8):
                if head[:1] not in (b" ", b"\r", b"\n", b"\t"):
                    break
                head = head[1:] + self.transport.read_bytes(1)
        if head[:1] != b"#" or not head[1:2].isdigit():
            raise self._protocol(f"binary block must start with '#<digit>', got {head!r}")
        ndigits = int(head[1:2])
        if ndigits == 0:
            return None
        header = head + self.transport.read_bytes(ndigits)
        try:
            _, length = parse_block_header(header, max_bytes=self._cap(indefinite=False))
        except ProtocolError as exc:
            raise self._protocol(str(exc)) from None
        return length

    def definite(self, length: int) -> bytes | bytearray:
        """Exactly ``length`` data bytes, chunk by chunk, then the trailing terminator."""
        deadline = self.bounds.deadline(length, self.start)
        chunk, read_bytes = self.bounds.chunk_bytes, self.transport.read_bytes
        data = bytearray()
        got = 0
        while got < length:
            self._between_chunks(got, length, deadline)
            self._await_data(got, length, deadline)
            want = length - got
            data += self._within(deadline, read_bytes, want if want < chunk else chunk)
            got = len(data)
        rest = self._within(deadline, self.transport.read)
        if rest.strip(b"\r\n"):
            raise self._protocol(f"{len(rest)} unexpected bytes after the binary block")
        return data  # no copy: numpy reads a bytearray as it is

    def indefinite(self) -> bytes | bytearray:
        """``#0`` data to the message terminator; a terminator followed at once by more data is part
        of the data (a real instrument sends the block in one go)."""
        cap = self._cap(indefinite=True)
        deadline = self.bounds.deadline(cap, self.start)
        term = self.transport.read_termination.encode("ascii")
        self._await_data(0, None, deadline)
        data = bytearray(self._within(deadline, self.transport.read))
        while True:
            if len(data) > cap:
                raise self._protocol(f"indefinite block above the cap of {cap} bytes")
            self._between_chunks(len(data), None, deadline)
            if not self.transport.more_pending():
                return data
            data += term + self._within(deadline, self.transport.read)

    # -- bounds ---------------------------------------------------------------------------------
    def _cap(self, *, indefinite: bool) -> int:
        return block_cap(self.expected_bytes, indefinite=indefinite, hard_cap=self.bounds.cap_bytes)

    def _between_chunks(self, got: int, total: int | None, deadline: float) -> None:
        if self.bounds.stop is not None and self.bounds.stop():
            raise ReadStopped(
                f"block read stopped by a stop request after {got}{_of(total)} bytes",
                address=self.transport.address,
                command=self.command,
            )
        if time.monotonic() > deadline:
            raise InstrumentTimeout(
                f"block not complete within {deadline - self.start:.1f} s ({got}{_of(total)} "
                f"bytes; link timeout plus a {self.bounds.min_transfer_Bps:g} B/s transfer floor)",
                address=self.transport.address,
                command=self.command,
            )

    def _await_data(self, got: int, total: int | None, deadline: float) -> None:
        """Wait for the next bytes in short slices, looking at the stop flag and the deadline in
        between, for at most the link timeout (the read that follows then reports the timeout).
        Links that cannot tell whether input waits (``wait_for_input`` absent or None) skip this."""
        wait = self._wait
        if wait is None:
            return
        limit = time.monotonic() + self.transport.timeout_ms / 1000.0
        if deadline < limit:
            limit = deadline
        while True:
            ready = wait(_slice_until(limit))
            if ready is None or ready or time.monotonic() >= limit:
                return
            self._between_chunks(got, total, deadline)

    def _within(self, deadline: float, read: Callable[..., bytes], *args: int) -> bytes:
        """``read(*args)`` with the link's timeout cut to what is left before ``deadline`` (a plain
        call, not a context manager: this runs for every chunk and every block's terminator)."""
        transport = self.transport
        before = transport.timeout_ms
        left_ms = int((deadline - time.monotonic()) * 1000)
        left_ms = left_ms if left_ms > 1 else 1
        if left_ms >= before:
            return read(*args)
        transport.timeout_ms = left_ms
        try:
            return read(*args)
        finally:
            with contextlib.suppress(TransportError):
                transport.timeout_ms = before

    def _protocol(self, message: str) -> ProtocolError:
        return ProtocolError(message, address=self.transport.address, command=self.command)


def _slice_until(limit: float) -> float:
    """The next wait's length: ``STOP_SLICE_S``, less when ``limit`` (monotonic seconds) comes
    sooner, never below 0.  Comparisons rather than ``min``/``max``: several waits run per block,
    and each of those builtins costs about 700 machine instructions (callgrind)."""
    left = limit - time.monotonic()
    return STOP_SLICE_S if left > STOP_SLICE_S else (left if left > 0.0 else 0.0)


def _of(total: int | None) -> str:
    return f" of {total}" if total is not None else ""


def await_reply(
    transport: Any, stop: StopCheck | None, timeout_s: float, *, command: str = ""
) -> None:
    """Wait up to ``timeout_s`` for a reply to begin, in ``STOP_SLICE_S`` slices, raising
    :class:`ReadStopped` when ``stop`` says so; returns at once where the link cannot tell
    (no ``wait_for_input``) or nobody can ask to stop.  The read that follows reports a timeout."""
    wait = getattr(transport, "wait_for_input", None)
    if wait is None or stop is None:
        return
    limit = time.monotonic() + timeout_s
    while True:
        if stop():
            raise ReadStopped(
                "wait for the reply given up by a stop request",
                address=transport.address,
                command=command,
            )
        ready = wait(_slice_until(limit))
        if ready is None or ready or time.monotonic() >= limit:
            return


def read_block(
    transport: Any, bounds: BlockBounds, *, command: str = "", expected_bytes: int | None = None
) -> bytes | bytearray:
    """The data bytes of one block reply (header and terminator consumed), within ``bounds``."""
    reader = BlockReader(transport, bounds, command=command, expected_bytes=expected_bytes)
    length = reader.header()
    return reader.indefinite() if length is None else reader.definite(length)
