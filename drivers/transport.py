"""The link to one instrument: a VISA resource opened through pyvisa (the only module importing it).

The contract above this module is tiny -- ``write(text)``, ``read() -> bytes``, ``read_bytes(n)``,
``drain()``, ``more_pending()``, ``reconnect()``, ``close()`` and a context manager -- so the SCPI
layer can be tested over a scripted transport.

Facts of pyvisa 1.16 / pyvisa-py 0.8 handled here:

* pyvisa-py leaves Nagle's algorithm on, so a write followed by a query stalls ~40 ms on the peer's
  delayed ACK; its ``VI_ATTR_TCPIP_NODELAY`` setter is not wired, so TCP_NODELAY is set on the
  session's socket (``visalib.sessions[session].interface``).
* A refused connection is not reported at open (non-blocking connect); the socket's ``SO_ERROR`` is
  checked right after opening so it surfaces here, with the address.
* A peer that closed shows only as a timeout in pyvisa-py; the socket is peeked for end-of-file before
  each write and after a timeout, so it is reported as :class:`ConnectionClosed`.
* ``read_bytes`` with the termination character enabled ends a low-level read at every 0x0A byte of
  binary data; it runs here with the termination character off.
* Fast path (``socket_fast_path``, on by default): on a pyvisa-py SOCKET session, messages and blocks
  are sent and received on the session's socket by :mod:`drivers.sockio`, sharing pyvisa-py's pending
  buffer.  pyvisa still resolves and opens the address and owns the session.  Measured on loopback
  (tests/benchmarks/bench_drivers.py): a 2 MB block is received straight into one buffer instead of
  copied once per layer, and a write + query costs about half as much Python time.  Other backends
  and INSTR resources go through pyvisa's ``write`` / ``read_raw`` / ``read_bytes``.
"""

from __future__ import annotations

import contextlib
import select
import socket
import time
from types import TracebackType
from typing import Any

import pyvisa
from pyvisa import constants
from pyvisa.errors import InvalidSession, VisaIOError

from drivers import instr_links, sockio
from drivers.errors import (
    ConnectionClosed,
    ConnectionRefused,
    InstrumentTimeout,
    ProtocolError,
    TransportError,
)
from drivers.link_faults import MAPPED_ERRORS as _MAPPED_ERRORS
from drivers.link_faults import ErrorMap as _ErrorMap
from drivers.link_faults import check_connected as _check_connected
from drivers.link_faults import translate_link_error
from drivers.transport_settings import (
    DEFAULT_BUSY_POLL_US,
    DEFAULT_CHUNK_SIZE,
    DEFAULT_RECONNECT_ATTEMPTS,
    DEFAULT_RECONNECT_BACKOFF_S,
    DEFAULT_TIMEOUT_MS,
    DEFAULT_VISA_LIBRARY,
    MAX_MESSAGE_BYTES,
    TransportSettings,
)

_TIMEOUT_CODES = {constants.StatusCode.error_timeout}
_CLOSED_CODES = {
    constants.StatusCode.error_connection_lost,
    constants.StatusCode.error_io,
    constants.StatusCode.error_invalid_object,
}
_REFUSED_CODES = {
    constants.StatusCode.error_resource_not_found,
    constants.StatusCode.error_resource_busy,
}


class VisaTransport:
    """One open VISA resource; every pyvisa and socket error leaves as a :class:`TransportError`."""

    def __init__(self, address: str, settings: TransportSettings, resource: Any) -> None:
        self.address = address
        self.settings = settings
        self._resource: Any = resource
        self._last_command = ""  # attached to errors of the reads that follow it
        self._timeout_ms = int(settings.timeout_ms)
        self._resource_timeout_ms = int(settings.timeout_ms)  # what the VISA resource has now
        self._session_of: tuple[Any, Any] = (None, None)  # (resource, its pyvisa-py session)
        self._link = sockio.SessionLink()  # that session's pending buffer and socket
        self._read_term = settings.read_termination.encode("ascii")
        self._write_term = settings.write_termination
        # self-disabling, and kept between openings of the same address (sockio.busy_poll_for)
        self._poll = sockio.busy_poll_for(address, max(0, settings.busy_poll_us) / 1e6)
        self._poll_left = False  # left for the next opening at close (once)
        #: Why the last close of the resource failed ('' when it did not); the link is dropped
        #: either way (a backend may raise anything while closing a dead session).
        self.close_error = ""
        self._held = instr_links.HeldBytes()  # what a VXI-11 wait took off the link

    # -- opening -------------------------------------------------------------------------------
    @classmethod
    def open(
        cls,
        address: str,
        *,
        visa_library: str = DEFAULT_VISA_LIBRARY,
        timeout_ms: int = DEFAULT_TIMEOUT_MS,
        read_termination: str = "\n",
        write_termination: str = "\n",
        chunk_size: int = DEFAULT_CHUNK_SIZE,
        reconnect_attempts: int = DEFAULT_RECONNECT_ATTEMPTS,
        reconnect_backoff_s: float = DEFAULT_RECONNECT_BACKOFF_S,
        socket_fast_path: bool = True,
        busy_poll_us: int = DEFAULT_BUSY_POLL_US,
    ) -> VisaTransport:
        """Open ``address`` (e.g. ``TCPIP0::127.0.0.1::5025::SOCKET``) on ``visa_library``."""
        settings = TransportSettings(
            visa_library=visa_library,
            timeout_ms=timeout_ms,
            read_termination=read_termination,
            write_termination=write_termination,
            chunk_size=chunk_size,
            reconnect_attempts=reconnect_attempts,
            reconnect_backoff_s=reconnect_backoff_s,
            socket_fast_path=socket_fast_path,
            busy_poll_us=busy_poll_us,
        )
        return cls(address, settings, _open_resource(address, settings))

    @property
    def read_termination(self) -> str:
        return self.settings.read_termination

    @property
    def timeout_ms(self) -> int:
        """The current I/O timeout in milliseconds (kept here and on the VISA resource)."""
        return self._timeout_ms

    @timeout_ms.setter
    def timeout_ms(self, value: int) -> None:
        # Kept here; handed to the VISA resource only before I/O that goes through pyvisa (the
        # socket fast path applies it itself), so a capture's longer timeout costs no VISA calls.
        self._timeout_ms = int(value)

    def _visa(self, resource: Any) -> Any:
        """``resource`` with the current timeout applied, for I/O through pyvisa."""
        if self._resource_timeout_ms != self._timeout_ms:
            resource.timeout = self._timeout_ms
            self._resource_timeout_ms = self._timeout_ms
        return resource

    # -- I/O -----------------------------------------------------------------------------------
    def write(self, text: str) -> None:
        """Send one message; the write termination is appended.

        On the pyvisa path a closed peer is looked for first (pyvisa-py would only show it as a
        timeout); on the fast path the next read sees end-of-file at once.
        """
        resource = self._live()
        link = self._fast_link(resource)
        if link is None and _peer_closed(_socket_of(resource) or instr_links.rpc_socket(_session(resource))):
            raise ConnectionClosed(
                "the instrument closed the link", address=self.address, command=text
            )
        self._last_command = text
        try:  # not ``with self._mapped(...)``: this runs for every message
            if link is None:
                self._visa(resource).write(text)
            else:
                data = (text + self._write_term).encode("ascii")
                sockio.send_all(link[1], data, self._timeout_ms / 1000.0)
        except _MAPPED_ERRORS as exc:
            raise self._translate(exc, text) from exc

    def read(self) -> bytes:
        """One message up to the read termination, the terminator stripped."""
        if not self._held.data:
            data = self._receive_message()
        else:  # a VXI-11 wait took the reply's first byte(s) off the link
            held, ended = self._held.take(1 << 30)
            data = held if ended else held + self._receive_message()
        term = self._read_term
        return data[: -len(term)] if term and data.endswith(term) else data

    def _receive_message(self) -> bytes:
        resource = self._live()
        term = self._read_term
        link = self._fast_link(resource) if term else None  # no terminator: pyvisa reads to END
        try:
            if link is None:
                return self._visa(resource).read_raw()  # type: ignore[no-any-return]
            pending, sock = link
            return sockio.receive_message(
                pending, sock, term[-1:], self._timeout_ms / 1000.0, MAX_MESSAGE_BYTES, self._poll
            )
        except _MAPPED_ERRORS as exc:
            raise self._translate(exc, self._last_command) from exc

    def read_bytes(self, n: int) -> bytes:
        """Exactly ``n`` raw bytes, with the termination character off (binary data)."""
        if n <= 0:
            return b""
        if self._held.data:
            head, _ = self._held.take(n)
            return head if len(head) == n else head + self.read_bytes(n - len(head))
        resource = self._live()
        link = self._fast_link(resource)
        try:
            if link is not None:
                pending, sock = link
                timeout_s = self._timeout_ms / 1000.0
                return sockio.receive_exactly(pending, sock, n, timeout_s, self._poll)  # type: ignore[return-value]
            data = self._pyvisa_read_bytes(self._visa(resource), n)
        except _MAPPED_ERRORS as exc:
            raise self._translate(exc, self._last_command) from exc
        if len(data) != n and instr_links.message_based(self.address):
            raise ProtocolError(  # the link marked the message's end: the rest will not come
                f"the message ended after {len(data)} of {n} bytes (a short block)",
                address=self.address,
                command=self._last_command,
            )
        if len(data) != n:
            raise InstrumentTimeout(
                f"expected {n} bytes, got {len(data)}",
                address=self.address,
                command=self._last_command,
            )
        return data

    def _pyvisa_read_bytes(self, resource: Any, n: int) -> bytes:
        if instr_links.message_based(self.address):  # termination character already off (see _open_resource)
            # stop at END: pyvisa-py's HiSLIP read past a DataEnd returns b"" at once, so reading
            # on for bytes a short block never sends would spin in pyvisa's loop forever
            return resource.read_bytes(n, break_on_termchar=True)
        attr = constants.ResourceAttribute.termchar_enabled
        resource.set_visa_attribute(attr, constants.VI_FALSE)
        try:
            return resource.read_bytes(n, break_on_termchar=False)
        finally:
            if self.settings.read_termination:
                resource.set_visa_attribute(attr, constants.VI_TRUE)

    def _fast_link(self, resource: Any) -> tuple[bytearray, socket.socket] | None:
        """(pending buffer, socket) of a pyvisa-py SOCKET session, when the fast path is on."""
        if not self.settings.socket_fast_path:
            return None
        if resource is not self._session_of[0]:  # looked up once per opened resource
            self._session_of = (resource, _pyvisa_py_session(resource))
        return self._link.of(self._session_of[1])  # pyvisa-py may replace the buffer: checked

    def more_pending(self, wait_s: float = 0.005) -> bool:
        """True when more input is waiting (or arrives within ``wait_s``); best effort."""
        if self._held.data:
            return True
        resource = self._live()
        session = _pyvisa_py_session(resource)
        if session is not None and getattr(session, "_pending_buffer", None):
            return True
        sock = _socket_of(resource)
        if sock is None:
            return False
        try:
            ready, _, _ = select.select([sock], [], [], wait_s)
            return bool(ready) and sock.recv(1, socket.MSG_PEEK) != b""
        except OSError:
            return False

    def wait_for_input(self, timeout_s: float) -> bool | None:
        """True when input (or end-of-file) is waiting or arrives within ``timeout_s``, False when
        none does, None when this link cannot tell (not pyvisa-py SOCKET, HiSLIP or VXI-11).  Lets
        a long read wait in short slices and look at the stop flag in between."""
        if self._held.data:
            return True
        resource = self._live()
        link = self._fast_link(resource)
        try:
            if link is not None:  # what arrives is received at once: the read needs no select
                wait_s = timeout_s if timeout_s > 0.0 else 0.0  # not max(): once per reply
                return sockio.wait_for_bytes(link[0], link[1], wait_s, self._poll)
        except (OSError, ValueError):
            return True  # the read that follows reports what is wrong
        session = _pyvisa_py_session(resource)
        if session is not None and getattr(session, "_pending_buffer", None):
            return True
        sock = _socket_of(resource) or instr_links.hislip_socket(session)
        if sock is None:
            return self._probe_vxi11(session, timeout_s)
        try:
            return bool(select.select([sock], [], [], max(0.0, timeout_s))[0])
        except (OSError, ValueError):
            return True  # the read that follows reports what is wrong

    def _probe_vxi11(self, session: Any, timeout_s: float) -> bool | None:
        """``wait_for_input`` on a VXI-11 session (``instr_links``); None on any other link."""
        if not instr_links.is_vxi11(session):
            return None
        try:
            probe = instr_links.probe_vxi11(session, timeout_s)
        except _MAPPED_ERRORS as exc:
            raise self._translate(exc, self._last_command) from exc
        self._held.keep(probe)
        return bool(probe.data) or probe.error != instr_links.VXI11_IO_TIMEOUT

    def drain(self) -> None:
        """Discard any input waiting (a late or partial reply), so the next reply is in step.

        On a pyvisa-py SOCKET session the socket is drained here, bounded by the timeout:
        pyvisa-py's own ``clear`` reads until the link has been quiet for 0.1 s, which never
        happens while an instrument floods it (an endless ``#0`` block).  An instrument still
        sending after the timeout is reported as :class:`ConnectionClosed`, so the session reopens
        the link (dropping the flood) before its next use.

        On an INSTR link the device is cleared (VXI-11 ``device_clear``, HiSLIP's device-clear
        exchange), which discards its pending output.  pyvisa-py's HiSLIP client first needs the
        unread rest of a reply it began (a malformed block's tail) read off the channel, or its
        clear reads that tail as the acknowledgement and fails ("protocol synchronization error"):
        it is read to the message's end here, bounded by the link timeout."""
        self._held.clear()
        resource = self._live()
        sock = _socket_of(resource)
        if sock is None:
            with self._mapped("<clear>"):
                visa = self._visa(resource)
                if instr_links.partial_message_pending(_session(resource)):
                    visa.read_raw()
                visa.clear()
            return
        pending = getattr(_pyvisa_py_session(resource), "_pending_buffer", None)
        if isinstance(pending, bytearray):
            pending.clear()
        try:
            sockio.discard_input(sock, self._timeout_ms / 1000.0)
        except _MAPPED_ERRORS as exc:
            raise self._translate(exc, "<clear>") from exc

    # -- life cycle ----------------------------------------------------------------------------
    def reconnect(self) -> None:
        """Close and reopen the link: a bounded number of attempts with doubling back-off."""
        self._close_resource()
        attempts = max(1, self.settings.reconnect_attempts)
        delay = self.settings.reconnect_backoff_s
        last: TransportError | None = None
        for attempt in range(attempts):
            try:
                self._resource = _open_resource(self.address, self.settings)
                self._timeout_ms = int(self.settings.timeout_ms)
                self._resource_timeout_ms = self._timeout_ms
                return
            except TransportError as exc:
                last = exc
            if attempt < attempts - 1:
                time.sleep(delay)
                delay *= 2
        assert last is not None
        raise type(last)(
            f"reconnect failed after {attempts} attempts ({last.__cause__ or last})",
            address=self.address,
        ) from last

    def close(self) -> None:
        """Close the resource (safe to call twice); the busy poll's decision is left for the next
        opening of the address (once: a second close leaves nothing)."""
        self._close_resource()
        if not self._poll_left:
            self._poll_left = True
            sockio.keep_busy_poll(self.address, self._poll)

    def __enter__(self) -> VisaTransport:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # -- internals -----------------------------------------------------------------------------
    def _live(self) -> Any:
        if self._resource is None:
            raise ConnectionClosed("the link is closed", address=self.address)
        return self._resource

    def _close_resource(self) -> None:
        self._held.clear()
        resource, self._resource = self._resource, None
        if resource is not None:
            rpc_sock = instr_links.rpc_socket(_session(resource))
            if rpc_sock is not None and _peer_closed(rpc_sock):
                # pyvisa-py's VXI-11 close asks destroy_link and waits 5 s for a reply from a
                # peer that is gone; shut down, the call fails at once (EPIPE) and it closes
                with contextlib.suppress(OSError):
                    rpc_sock.shutdown(socket.SHUT_RDWR)
            try:
                resource.close()
            except Exception as exc:  # a dead link may fail to close: kept, and the link is gone
                self.close_error = f"{type(exc).__name__}: {exc}"

    def _mapped(self, command: str = "") -> _ErrorMap:
        """Translate pyvisa and OS errors into ours, the address and command attached."""
        return _ErrorMap(self._translate, command)

    def _translate(self, exc: BaseException, command: str) -> TransportError:
        """Our error for one of ``_MAPPED_ERRORS`` (a pyvisa, OS or backend error), address and
        command attached; one of ours passes through with the command named."""
        if isinstance(exc, VisaIOError):
            return self._from_visa(exc, command)
        if isinstance(exc, InvalidSession):
            return ConnectionClosed(
                "the VISA session is gone", address=self.address, command=command
            )
        return translate_link_error(exc, self.address, command)

    def _from_visa(self, exc: VisaIOError, command: str) -> TransportError:
        code = exc.error_code
        if code in _TIMEOUT_CODES:
            if _peer_closed(_socket_of(self._resource)):
                return ConnectionClosed(
                    "the instrument closed the link", address=self.address, command=command
                )
            return InstrumentTimeout(
                f"no reply within {self.settings.timeout_ms} ms",
                address=self.address,
                command=command,
            )
        if code in _CLOSED_CODES:
            return ConnectionClosed(
                f"link lost ({exc.abbreviation})", address=self.address, command=command
            )
        if code in _REFUSED_CODES:
            return ConnectionRefused(
                f"cannot open ({exc.abbreviation})", address=self.address, command=command
            )
        return TransportError(
            f"VISA error {exc.abbreviation}", address=self.address, command=command
        )


def _open_resource(address: str, settings: TransportSettings) -> Any:
    """Open and configure one resource; refused links are reported here, not at the first write."""
    try:
        manager = pyvisa.ResourceManager(settings.visa_library)
        resource = manager.open_resource(address, open_timeout=settings.timeout_ms)
    except VisaIOError as exc:
        raise ConnectionRefused(f"cannot open ({exc.abbreviation})", address=address) from exc
    except (OSError, ValueError) as exc:
        raise ConnectionRefused(f"cannot open ({exc})", address=address) from exc
    except Exception as exc:  # pyvisa-py raises a bare Exception("could not connect: ...")
        raise ConnectionRefused(f"cannot open ({exc})", address=address) from exc
    try:
        resource.timeout = settings.timeout_ms
        resource.read_termination = settings.read_termination or None
        resource.write_termination = settings.write_termination
        resource.chunk_size = settings.chunk_size
        if instr_links.message_based(address):
            # an INSTR link marks each message's end (VXI-11 END flag, HiSLIP DataEnd): a read
            # ends there, not at a newline byte inside an indefinite #0 block (a VXI-11 device
            # honours the term character when asked to, ending the read at the first 0x0A)
            attr = constants.ResourceAttribute.termchar_enabled
            resource.set_visa_attribute(attr, constants.VI_FALSE)
        sock = _socket_of(resource)
        if sock is not None:
            _check_connected(sock, address)
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    except BaseException:
        with contextlib.suppress(Exception):
            resource.close()
        raise
    return resource


def _pyvisa_py_session(resource: Any) -> Any:
    sessions = getattr(getattr(resource, "visalib", None), "sessions", None)
    if not isinstance(sessions, dict):
        return None
    return sessions.get(getattr(resource, "session", None))


def _socket_of(resource: Any) -> socket.socket | None:
    """The TCP socket of a pyvisa-py SOCKET session, else ``None`` (other backends, INSTR)."""
    if resource is None:
        return None
    try:
        interface = getattr(_pyvisa_py_session(resource), "interface", None)
    except InvalidSession:
        return None
    return interface if isinstance(interface, socket.socket) else None


def _session(resource: Any) -> Any:
    """The pyvisa-py session under ``resource``, None when there is none (or it is closed)."""
    try:
        return _pyvisa_py_session(resource)
    except InvalidSession:
        return None


def _peer_closed(sock: socket.socket | None) -> bool:
    return sockio.peer_closed(sock)
