"""The SCPI layer above a transport: messages, numbers, binary blocks, the error queue, recovery.

* ``write`` sends a configuring command and then drains the error queue (``SYSTem:ERRor:NEXT?`` until
  ``0,...``); a non-zero entry raises :class:`InstrumentError` naming the command, code and message.
* ``query_block`` reads an IEEE 488.2 block itself: the header, then exactly the declared bytes with
  the termination character off, then the trailing terminator -- never ``query_binary_values``.
* After a timeout or a garbled reply the input is out of step: the next call drains it and
  resynchronises (``*CLS``, ``*OPC?``) first.  Queries and settings are retried once after that;
  actions (trigger, initiate, output on) never are.  A dropped link is reopened (bounded, by the
  transport) and the cached settings re-applied -- outputs are never switched on again by this layer.
* One re-entrant lock per instrument: every public method holds it, and a role holds it around a
  compound operation (``with session.lock:``), so two threads never interleave on one link.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from types import TracebackType
from typing import Protocol, TypeVar

import numpy as np

from drivers.errors import (
    BenchwrightError,
    ConnectionClosed,
    ConnectionRefused,
    InstrumentError,
    InstrumentTimeout,
    ProtocolError,
    ReadStopped,
    TransportError,
)
from drivers.scpi.blockread import (
    DEFAULT_BLOCK_CHUNK,
    DEFAULT_MIN_TRANSFER_BPS,
    BlockBounds,
    StopCheck,
    read_block,
)
from drivers.scpi.blocks import MAX_BLOCK_BYTES, decode_payload

DEFAULT_OPC_TIMEOUT_MS = 10_000
DEFAULT_RETRIES = 1
#: More entries than this in the error queue means the instrument is not answering the query sanely.
MAX_ERROR_ENTRIES = 64

T = TypeVar("T")


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


@dataclass(frozen=True)
class Identity:
    """The four fields of an IEEE 488.2 ``*IDN?`` reply (§4.1.3.6, from memory), and the raw text."""

    maker: str
    model: str
    serial: str
    firmware: str
    raw: str

    def __str__(self) -> str:
        return f"{self.maker} {self.model} (serial {self.serial}, firmware {self.firmware})"


def parse_identity(reply: str) -> Identity:
    """Split ``maker,model,serial,firmware``; missing fields are empty, extra commas stay in firmware.

    A reply holding control characters is not an identity but a garbled reply (identities are
    plain text fields; common practice): ``ProtocolError``.
    """
    text = reply.strip()
    if not text:
        raise ProtocolError("empty *IDN? reply")
    if any((c < " " and c != "\t") or c == "\x7f" for c in text):
        raise ProtocolError(f"*IDN? reply {text[:40]!r} holds control characters (garbled?)")
    fields = [f.strip() for f in text.split(",", 3)]
    fields += [""] * (4 - len(fields))
    return Identity(
        maker=fields[0], model=fields[1], serial=fields[2], firmware=fields[3], raw=text
    )


def parse_error_entry(reply: str) -> tuple[int, str]:
    """``-113,"Undefined header"`` -> ``(-113, "Undefined header")`` (SCPI-1999 SYSTem:ERRor format)."""
    code_text, sep, message = reply.strip().partition(",")
    try:
        code = int(code_text.strip())
    except ValueError:
        raise ProtocolError(f"error queue reply {reply!r} does not start with a number") from None
    message = message.strip()
    if len(message) >= 2 and message[0] == message[-1] == '"':
        message = message[1:-1].replace('""', '"')
    return code, message if sep else ""


def header_of(command: str) -> str:
    """The program header of a command (up to the first space), upper-cased: the settings-cache key."""
    return command.strip().split(" ", 1)[0].upper()


class ScpiSession:
    """One instrument spoken to in SCPI over a :class:`Transport`."""

    def __init__(
        self,
        transport: Transport,
        *,
        check_errors: bool = True,
        opc_timeout_ms: int = DEFAULT_OPC_TIMEOUT_MS,
        retries: int = DEFAULT_RETRIES,
        error_query: str = "SYSTem:ERRor:NEXT?",
        clear_command: str = "*CLS",
        opc_query: str = "*OPC?",
        max_block_bytes: int = MAX_BLOCK_BYTES,
        min_transfer_Bps: float = DEFAULT_MIN_TRANSFER_BPS,
        block_chunk_bytes: int = DEFAULT_BLOCK_CHUNK,
    ) -> None:
        self.transport = transport
        self.check_errors = check_errors
        self.opc_timeout_ms = opc_timeout_ms
        self.retries = retries
        self.error_query = error_query
        self.clear_command = clear_command
        self.opc_query = opc_query
        self.max_block_bytes = max_block_bytes
        self.min_transfer_Bps = min_transfer_Bps
        self.block_chunk_bytes = block_chunk_bytes
        #: Looked at between the chunks of a block read (the engine hands the run's stop flag down
        #: through ``Bench.watch_stop``); True gives the read up with ``ReadStopped``.
        self.stop_check: StopCheck | None = None
        self.lock = threading.RLock()
        self._settings: dict[str, str] = {}
        self._out_of_step = False
        self._link_lost = False
        #: How often the link was reopened / the input resynchronised (for logs and tests).
        self.reconnects = 0
        self.resyncs = 0

    @property
    def address(self) -> str:
        return self.transport.address

    # -- public verbs ----------------------------------------------------------------------------
    def write(
        self,
        command: str,
        *,
        reapply: bool = True,
        key: str | None = None,
        check: bool | None = None,
        timeout_ms: int | None = None,
    ) -> None:
        """Send a configuring command, then check the error queue.

        ``reapply``: remember it (under ``key``, default its header) to re-send after a reconnect, and
        retry it once after a link failure; pass ``False`` for actions (``*TRG``, ``INIT``, output on).
        ``check``: whether the error queue is read after it (default: the session's
        ``check_errors``); ``timeout_ms``: how long that check may wait (an acquisition's error
        check waits for the acquisition on many instruments: pass the operation-complete timeout).
        """
        with self.lock:
            self._call(lambda: self._write_checked(command, check, timeout_ms), retry=reapply)
            if reapply:
                self._settings[key or header_of(command)] = command

    def forget(self, prefix: str) -> None:
        """Drop cached settings whose key starts with ``prefix`` (e.g. after ``ROUTe:OPEN:ALL``)."""
        with self.lock:
            for k in [k for k in self._settings if k.startswith(prefix)]:
                del self._settings[k]

    @property
    def cached_settings(self) -> list[str]:
        """The commands re-applied after a reconnect, in order."""
        with self.lock:
            return list(self._settings.values())

    def query(self, command: str, *, timeout_ms: int | None = None, retry: bool = True) -> str:
        """Send a query and return its reply as text (terminator stripped)."""
        with self.lock:
            return self._call(lambda: self._ask(command, timeout_ms), retry=retry)

    def query_float(self, command: str, *, timeout_ms: int | None = None) -> float:
        return self.query_parsed(command, _to_float, timeout_ms=timeout_ms)

    def query_int(self, command: str, *, timeout_ms: int | None = None) -> int:
        return self.query_parsed(command, _to_int, timeout_ms=timeout_ms)

    def query_bool(self, command: str, *, timeout_ms: int | None = None) -> bool:
        return self.query_parsed(command, _to_bool, timeout_ms=timeout_ms)

    def query_csv(self, command: str, *, timeout_ms: int | None = None) -> list[float]:
        return self.query_parsed(command, _to_csv, timeout_ms=timeout_ms)

    def query_parsed(
        self, command: str, parse: Callable[[str], T], *, timeout_ms: int | None = None
    ) -> T:
        """Query and parse; a garbled reply puts the session out of step and is retried once."""

        def once() -> T:
            reply = self._ask(command, timeout_ms)
            try:
                return parse(reply)
            except ValueError as exc:
                raise ProtocolError(
                    f"garbled reply {reply!r}: {exc}", address=self.address, command=command
                ) from None

        with self.lock:
            return self._call(once, retry=True)

    def query_block(
        self,
        command: str,
        *,
        kind: str = "int16",
        big_endian: bool = True,
        timeout_ms: int | None = None,
        expected_bytes: int | None = None,
    ) -> np.ndarray:
        """Query an IEEE 488.2 binary block (``#<n><len>`` or ``#0``) straight into a numpy array
        (native byte order).  ``expected_bytes``: see :meth:`query_block_bytes`."""
        payload = self.query_block_bytes(
            command, timeout_ms=timeout_ms, expected_bytes=expected_bytes
        )
        try:
            return decode_payload(payload, kind=kind, big_endian=big_endian)
        except ProtocolError as exc:
            raise ProtocolError(str(exc), address=self.address, command=command) from None

    def query_block_bytes(
        self, command: str, *, timeout_ms: int | None = None, expected_bytes: int | None = None
    ) -> bytes | bytearray:
        """The data bytes of a binary block reply (header and terminator consumed), undecoded.

        Bounded (see :mod:`drivers.scpi.blockread`): at most ``expected_bytes`` plus a margin when
        given (the record's points x sample width), else ``max_block_bytes``; done within the
        timeout plus the size over ``min_transfer_Bps``; given up when ``stop_check`` says so.
        """
        with self.lock:
            return self._call(
                lambda: self._ask_block(command, timeout_ms, expected_bytes), retry=True
            )

    def identify(self) -> Identity:
        """``*IDN?`` parsed into maker, model, serial and firmware; a garbled reply puts the session
        out of step and is retried once (never taken for the identity)."""

        def once() -> Identity:
            reply = self._ask("*IDN?")
            try:
                return parse_identity(reply)
            except ProtocolError as exc:
                raise ProtocolError(str(exc), address=self.address, command="*IDN?") from None

        with self.lock:
            return self._call(once, retry=True)

    def wait_complete(self, timeout_ms: int | None = None) -> None:
        """Block until pending operations finish (``*OPC?``), with its own timeout."""
        with self.lock:
            self._call(lambda: self._sync(timeout_ms or self.opc_timeout_ms), retry=True)

    def errors(self) -> list[tuple[int, str]]:
        """Drain the error queue; ``[]`` when it holds only ``0,"No error"``."""
        with self.lock:
            return self._call(self._drain_errors, retry=True)

    def resynchronise(self) -> None:
        """Discard stray input, clear status (``*CLS``) and wait for ``*OPC?``."""
        with self.lock:
            self._resync()

    def close(self) -> None:
        with self.lock:
            self.transport.close()

    def __enter__(self) -> ScpiSession:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # -- recovery --------------------------------------------------------------------------------
    def _call(self, op: Callable[[], T], *, retry: bool) -> T:
        if self._link_lost or self._out_of_step:
            self._recover_if_needed()
        attempts = 1 + (max(0, self.retries) if retry else 0)
        for attempt in range(attempts):
            try:
                return op()
            except ReadStopped:  # the rest of the reply is still coming: resync before next use
                self._out_of_step = True
                raise
            except (InstrumentTimeout, ProtocolError) as exc:
                self._out_of_step = True
                if attempt == attempts - 1:
                    raise
                failure: BenchwrightError = exc
            except (ConnectionClosed, ConnectionRefused) as exc:
                self._link_lost = True
                if attempt == attempts - 1:
                    raise
                failure = exc
            try:
                self._recover_if_needed()
            except (TransportError, ProtocolError) as recovery:
                raise failure from recovery  # the command that failed, not the resync, is the news
        raise AssertionError("unreachable")  # pragma: no cover

    def _recover_if_needed(self) -> None:
        if self._out_of_step and not self._link_lost:
            try:
                self._resync()
                return
            except ConnectionClosed:  # a flood that never stops, or a closed peer: reopen
                self._link_lost = True
        if self._link_lost:
            self.transport.reconnect()
            self.reconnects += 1
            self._link_lost = False
            self._out_of_step = True
            self._resync()
            for command in list(self._settings.values()):
                self._write_checked(command)

    def _resync(self) -> None:
        self.resyncs += 1
        self.transport.drain()
        self._send(self.clear_command)
        # An instrument that answers at all answers *OPC? after *CLS at once: wait no longer than
        # for an ordinary reply, so a dead link is reported after one timeout, not after opc_timeout.
        ordinary = getattr(self.transport, "timeout_ms", None)
        self._sync(min(self.opc_timeout_ms, ordinary) if ordinary else self.opc_timeout_ms)
        self._out_of_step = False

    # -- wire ------------------------------------------------------------------------------------
    def _send(self, command: str) -> None:
        self.transport.write(command)

    def _ask(self, command: str, timeout_ms: int | None = None) -> str:
        if timeout_ms is not None:
            with self._timeout(timeout_ms):
                return self._ask(command)
        self._send(command)
        try:
            return self.transport.read().decode("ascii", "replace").strip()
        except TransportError as exc:
            raise exc.with_command(command) from exc

    def _sync(self, timeout_ms: int) -> None:
        reply = self._ask(self.opc_query, timeout_ms)
        if reply.strip() not in ("1", "+1"):
            raise ProtocolError(
                f"{self.opc_query} replied {reply!r}, expected 1", address=self.address
            )

    def _write_checked(
        self, command: str, check: bool | None = None, timeout_ms: int | None = None
    ) -> None:
        self._send(command)
        if not (self.check_errors if check is None else check):
            return
        try:
            with self._timeout(timeout_ms):
                entries = self._drain_errors()
        except TransportError as exc:  # the news is the command before the check (INIT, ...)
            raise exc.checking_after(command) from exc
        if entries:
            code, message = entries[0]
            error = InstrumentError(code, message, address=self.address, command=command)
            error.queued = entries  # type: ignore[attr-defined]  # every entry drained, in order
            raise error

    def _drain_errors(self) -> list[tuple[int, str]]:
        entries: list[tuple[int, str]] = []
        for _ in range(MAX_ERROR_ENTRIES):
            code, message = parse_error_entry(self._ask(self.error_query))
            if code == 0:
                return entries
            entries.append((code, message))
        raise ProtocolError(
            f"error queue still not empty after {MAX_ERROR_ENTRIES} reads", address=self.address
        )

    def _ask_block(
        self, command: str, timeout_ms: int | None, expected_bytes: int | None
    ) -> bytes | bytearray:
        try:
            with self._timeout(timeout_ms):
                self._send(command)
                bounds = BlockBounds(
                    cap_bytes=self.max_block_bytes,
                    timeout_s=self.transport.timeout_ms / 1000.0,
                    min_transfer_Bps=self.min_transfer_Bps,
                    chunk_bytes=self.block_chunk_bytes,
                    stop=self.stop_check,
                )
                return read_block(
                    self.transport, bounds, command=command, expected_bytes=expected_bytes
                )
        except TransportError as exc:
            raise exc.with_command(command) from exc

    @contextlib.contextmanager
    def _timeout(self, timeout_ms: int | None) -> Iterator[None]:
        if timeout_ms is None:
            yield
            return
        before = self.transport.timeout_ms
        self.transport.timeout_ms = int(timeout_ms)
        try:
            yield
        finally:
            with contextlib.suppress(TransportError):
                self.transport.timeout_ms = before


def _to_float(text: str) -> float:
    return float(text.strip())


def _to_int(text: str) -> int:
    with contextlib.suppress(ValueError):
        return int(text.strip())
    value = float(text.strip())
    if not value.is_integer():
        raise ValueError("not an integer")
    return int(value)


def _to_bool(text: str) -> bool:
    word = text.strip().upper()
    if word in ("1", "+1", "ON"):
        return True
    if word in ("0", "+0", "OFF"):
        return False
    raise ValueError("expected 1/0 or ON/OFF")


def _to_csv(text: str) -> list[float]:
    return [float(part) for part in text.strip().split(",") if part.strip()]
