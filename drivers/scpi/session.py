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
* Fewer round trips (:mod:`drivers.scpi.messages`, as the dialect allows): unchanged settings are not
  sent again, the error query joins its command's message, and a :meth:`ScpiSession.group` of
  configuring commands goes out as one message with one error check.  ``messages`` counts the program
  messages sent (one exchange each), ``skipped`` the settings not re-sent.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable, Iterator
from typing import TypeVar

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
from drivers.scpi import errorqueue
from drivers.scpi.blockread import (
    DEFAULT_BLOCK_CHUNK,
    DEFAULT_MIN_TRANSFER_BPS,
    BlockBounds,
    StopCheck,
    await_reply,
    read_block,
)
from drivers.scpi.blocks import MAX_BLOCK_BYTES, decode_payload
from drivers.scpi.link import Transport, link_timeout
from drivers.scpi.messages import PLAIN, MessagePolicy, absolute, join_units
from drivers.scpi.plain import (
    Identity,
    header_of,
    parse_error_entry,  # noqa: F401 -- re-exported (drivers.scpi.plain's docstring)
    parse_identity,
    to_bool,
    to_csv,
    to_float,
    to_int,
)

DEFAULT_OPC_TIMEOUT_MS = 10_000
DEFAULT_RETRIES = 1

T = TypeVar("T")


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
        policy: MessagePolicy = PLAIN,
    ) -> None:
        self.transport = transport
        self.policy = policy
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
        self._bounds_inputs: tuple[object, ...] = ()
        self._bounds: BlockBounds | None = None
        self.lock = threading.RLock()
        self._settings: dict[str, str] = {}
        #: What the instrument is known to hold (key -> command), for ``policy.skip_unchanged``.
        self._known: dict[str, str] = {}
        #: Configuring commands held back by :meth:`group`: (command, key or None, check).
        self._pending: list[tuple[str, str | None, bool]] | None = None
        self._out_of_step = False
        self._link_lost = False
        #: How often the link was reopened / the input resynchronised (for logs and tests).
        self.reconnects = 0
        self.resyncs = 0
        #: Program messages sent (each one exchange on the link) and settings not re-sent.
        self.messages = 0
        self.skipped = 0
        #: Writes sent or held (not skipped), and times the instrument's state became unknown
        #: (error, resync, reconnect, *RST, forget): a role's cache holds while neither moves.
        self.changes = self.state_lost = 0

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
        track: bool = True,
    ) -> None:
        """Send a configuring command, then check the error queue.

        ``reapply``: remember it (under ``key``, default its header) to re-send after a reconnect, and
        retry it once after a link failure; pass ``False`` for actions (``*TRG``, ``INIT``, output on).
        ``check``: whether the error queue is read after it (default: the session's
        ``check_errors``); ``timeout_ms``: how long that check may wait (an acquisition's error
        check waits for the acquisition on many instruments: pass the operation-complete timeout).
        ``track``: with the policy's ``skip_unchanged``, a remembered setting equal to ``command``
        is not sent again; pass ``False`` for anything a safety decision rests on.
        """
        header = header_of(command)
        name = key or header
        checked = self.check_errors if check is None else check
        with self.lock:
            if header == "*RST":
                self._lose_state()
            tracked = reapply and track and self.policy.skip_unchanged
            if tracked and self._known.get(name) == command:
                self.skipped += 1
                return
            self.changes += 1
            if self._pending is not None and timeout_ms is None:
                self._pending.append((command, name if reapply else None, checked))
                self._known.pop(name, None)
                return
            try:
                self._call(lambda: self._write_checked(command, checked, timeout_ms), retry=reapply)
            except BaseException:
                self._lose_state()
                raise
            if reapply:
                self._settings[name] = command
                if tracked:
                    self._known[name] = command

    @contextlib.contextmanager
    def group(self) -> Iterator[None]:
        """Hold the configuring writes made inside and send them together at the end: joined into
        one message when the policy allows (``join``), the error queue read once for the group
        when it allows (``errors_per_group``), else one by one as :meth:`write` would.  Writes
        with their own timeout (acquisitions) are not held.  If the body raises, nothing held is
        sent.  Nested groups join the outer one."""
        with self.lock:
            if self._pending is not None:
                yield
                return
            self._pending = []
            try:
                yield
                pending = self._pending
            finally:
                self._pending = None
            if pending:
                self._send_group(pending)

    def _send_group(self, pending: list[tuple[str, str | None, bool]]) -> None:
        commands = [c for c, _, _ in pending]
        checked = any(ch for _, _, ch in pending)
        retry = all(k is not None for _, k, _ in pending)
        try:
            if self.policy.join:
                text = join_units(commands)
                self._call(lambda: self._write_checked(text, checked, None), retry=retry)
            elif self.policy.errors_per_group:
                self._call(lambda: self._write_all(commands, checked), retry=retry)
            else:
                for command, _, ch in pending:
                    self._call(lambda c=command, k=ch: self._write_checked(c, k, None), retry=retry)
        except BaseException:
            self._lose_state()
            raise
        for command, name, _ in pending:
            if name is not None:
                self._settings[name] = command
                if self.policy.skip_unchanged:
                    self._known[name] = command

    def _write_all(self, commands: list[str], checked: bool) -> None:
        for command in commands[:-1]:
            self._send(command)
        self._write_checked(commands[-1], checked, None, group="; ".join(commands))

    def forget(self, prefix: str) -> None:
        """Drop cached settings whose key starts with ``prefix`` (e.g. after ``ROUTe:OPEN:ALL``)."""
        with self.lock:
            self.state_lost += 1
            for k in [k for k in self._settings if k.startswith(prefix)]:
                del self._settings[k]
            for k in [k for k in self._known if k.startswith(prefix)]:
                del self._known[k]

    @property
    def cached_settings(self) -> list[str]:
        """The commands re-applied after a reconnect, in order."""
        with self.lock:
            return list(self._settings.values())

    def query(
        self, command: str, *, timeout_ms: int | None = None, retry: bool = True,
        sliced: bool = False,
    ) -> str:  # fmt: skip
        """Send a query and return its reply as text (terminator stripped); ``sliced``: a long
        wait (an acquisition) looks at the stop check while the reply is awaited."""
        with self.lock:
            return self._call(lambda: self._ask(command, timeout_ms, sliced=sliced), retry=retry)

    def query_float(self, command: str, *, timeout_ms: int | None = None) -> float:
        return self.query_parsed(command, to_float, timeout_ms=timeout_ms)

    def query_int(self, command: str, *, timeout_ms: int | None = None) -> int:
        return self.query_parsed(command, to_int, timeout_ms=timeout_ms)

    def query_bool(self, command: str, *, timeout_ms: int | None = None) -> bool:
        return self.query_parsed(command, to_bool, timeout_ms=timeout_ms)

    def query_csv(self, command: str, *, timeout_ms: int | None = None) -> list[float]:
        return self.query_parsed(command, to_csv, timeout_ms=timeout_ms)

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

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    # -- recovery --------------------------------------------------------------------------------
    def _call(self, op: Callable[[], T], *, retry: bool) -> T:
        if self._pending:  # anything else sent inside a group goes after the writes held so far
            pending, self._pending = self._pending, []
            self._send_group(pending)
        if self._link_lost or self._out_of_step:
            self._recover_if_needed()
        attempts = 1 + (self.retries if retry and self.retries > 0 else 0)  # not max(): per call
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

    def _lose_state(self) -> None:  # settings are sent again, caches (the preamble) dropped
        self._known.clear()
        self.state_lost += 1

    def _recover_if_needed(self) -> None:
        self._lose_state()  # whatever went wrong, what the instrument holds is no longer known
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
        self.messages += 1
        self.transport.write(command)

    def _ask(self, command: str, timeout_ms: int | None = None, *, sliced: bool = False) -> str:
        """Send ``command`` and read its reply; ``sliced``: wait for it in short slices, looking
        at the stop check (a long wait, e.g. ``*OPC?`` while the instrument acquires)."""
        if timeout_ms is not None:
            with link_timeout(self.transport, timeout_ms):
                return self._ask(command, sliced=sliced)
        self._send(command)
        if sliced:
            await_reply(self.transport, self.stop_check, self.transport.timeout_ms / 1000.0,
                        command=command)
        try:
            return self.transport.read().decode("ascii", "replace").strip()
        except TransportError as exc:
            raise exc.with_command(command) from exc

    def _sync(self, timeout_ms: int) -> None:
        reply = self._ask(self.opc_query, timeout_ms, sliced=True)
        if reply.strip() not in ("1", "+1"):
            raise ProtocolError(
                f"{self.opc_query} replied {reply!r}, expected 1", address=self.address
            )

    def _write_checked(
        self,
        command: str,
        check: bool | None = None,
        timeout_ms: int | None = None,
        *,
        group: str | None = None,
    ) -> None:
        if not (self.check_errors if check is None else check):
            self._send(command)
            return
        if timeout_ms is not None:  # as in _ask: no context at all for the usual None
            with link_timeout(self.transport, timeout_ms):
                return self._write_checked(command, True, None, group=group)
        try:
            if self.policy.join and group is None:  # the error query joined: one exchange
                first = self._ask(f"{command};{absolute(self.error_query)}")
                entries = errorqueue.entries_after(first, self._ask, self.error_query,
                                                   address=self.address)  # fmt: skip
            else:
                self._send(command)
                entries = self._drain_errors()
        except TransportError as exc:  # the news is the command before the check (INIT, ...)
            raise exc.checking_after(command) from exc
        if entries:
            code, message = entries[0]
            error = InstrumentError(code, message, address=self.address, command=group or command)
            error.queued = entries  # type: ignore[attr-defined]  # every entry drained, in order
            raise error

    def _drain_errors(self) -> list[tuple[int, str]]:
        return errorqueue.drain(self._ask, self.error_query, address=self.address)

    def _ask_block(
        self, command: str, timeout_ms: int | None, expected_bytes: int | None
    ) -> bytes | bytearray:
        if timeout_ms is not None:  # as in _ask: no context at all for the usual None
            with link_timeout(self.transport, timeout_ms):
                return self._ask_block(command, None, expected_bytes)
        try:
            self._send(command)
            return read_block(self.transport, self._block_bounds(), command=command,
                              expected_bytes=expected_bytes)  # fmt: skip
        except TransportError as exc:
            raise exc.with_command(command) from exc

    def _block_bounds(self) -> BlockBounds:
        """The bounds of a block read now: the last ones again while none of what they are made
        of changed (a frozen record built once per change, not per block)."""
        inputs = (self.max_block_bytes, self.transport.timeout_ms / 1000.0,
                  self.min_transfer_Bps, self.block_chunk_bytes, self.stop_check)  # fmt: skip
        if inputs != self._bounds_inputs:
            cap, timeout_s, floor, chunk, stop = self._bounds_inputs = inputs
            self._bounds = BlockBounds(cap_bytes=cap, timeout_s=timeout_s,
                                       min_transfer_Bps=floor, chunk_bytes=chunk, stop=stop)  # fmt: skip
        return self._bounds
