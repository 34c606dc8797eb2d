"""The simulated instruments over HiSLIP (IVI-6.1, High-Speed LAN Instrument Protocol), so tests
exercise ``TCPIP0::127.0.0.1::hislip0,PORT::INSTR`` resources through pyvisa, not only raw sockets.

What is served (IVI-6.1 rev. 2, message types and header layout from memory; the synchronous
"non-overlapped" mode only):

* every message starts with a 16-byte header: ``HS``, message type (u8), control code (u8),
  message parameter (u32), payload length (u64), big-endian;
* a client opens the synchronous channel with ``Initialize`` (answered ``InitializeResponse``:
  protocol version 1.0 and a session id), then the asynchronous one with ``AsyncInitialize``;
* program messages arrive as ``Data``/``DataEnd``; at ``DataEnd`` the message runs through the same
  faults and instrument as the raw-socket server (:meth:`InstrumentServer.respond`), and the reply
  goes back as one ``DataEnd`` carrying the request's message id;
* device clear (``AsyncDeviceClear`` then ``DeviceClearComplete``) discards a partial message;
  ``AsyncStatusQuery`` answers the status byte; lock and remote/local requests are acknowledged.

A ``disconnect`` fault closes both channels of the session -- what a dropped HiSLIP link looks like
to the client (pyvisa-py then raises a plain ``RuntimeError`` or a socket error).
"""

from __future__ import annotations

import contextlib
import itertools
import socket
import struct
import threading
from dataclasses import dataclass, field

from drivers.sim.server import MAX_LINE, InstrumentServer
from drivers.sim.tcp_serving import ConnectionServer, receive_exactly

HEADER = struct.Struct("!2sBBIQ")
MAX_PAYLOAD = 1 << 24  # a larger announced payload is not a client we serve

# message types (IVI-6.1 table of message types, from memory)
INITIALIZE, INITIALIZE_RESPONSE, FATAL_ERROR, ERROR = 0, 1, 2, 3
ASYNC_LOCK, ASYNC_LOCK_RESPONSE, DATA, DATA_END = 4, 5, 6, 7
DEVICE_CLEAR_COMPLETE, DEVICE_CLEAR_ACKNOWLEDGE = 8, 9
ASYNC_REMOTE_LOCAL_CONTROL, ASYNC_REMOTE_LOCAL_RESPONSE, TRIGGER = 10, 11, 12
ASYNC_MAX_MSG_SIZE, ASYNC_MAX_MSG_SIZE_RESPONSE = 15, 16
ASYNC_INITIALIZE, ASYNC_INITIALIZE_RESPONSE, ASYNC_DEVICE_CLEAR = 17, 18, 19
ASYNC_STATUS_QUERY, ASYNC_STATUS_RESPONSE, ASYNC_DEVICE_CLEAR_ACKNOWLEDGE = 21, 22, 23
ASYNC_LOCK_INFO, ASYNC_LOCK_INFO_RESPONSE = 24, 25
PROTOCOL_VERSION = 0x0100  # 1.0
VENDOR = int.from_bytes(b"BW", "big")


@dataclass
class _Session:
    sync: socket.socket
    channels: list[socket.socket] = field(default_factory=list)
    partial: bytearray = field(default_factory=bytearray)


def pack(kind: int, control: int = 0, parameter: int = 0, payload: bytes = b"") -> bytes:
    """One HiSLIP message: the header, then the payload."""
    return HEADER.pack(b"HS", kind, control, parameter & 0xFFFF_FFFF, len(payload)) + payload


def read_message(sock: socket.socket) -> tuple[int, int, int, bytes] | None:
    """(type, control code, parameter, payload) of the next message; None at end of stream."""
    head = receive_exactly(sock, HEADER.size)
    if head is None:
        return None
    prologue, kind, control, parameter, length = HEADER.unpack(head)
    if prologue != b"HS" or length > MAX_PAYLOAD:
        return None
    payload = receive_exactly(sock, length) if length else b""
    return None if payload is None else (kind, control, parameter, payload)


class HislipServer:
    """Serves one instrument (through its raw-socket :class:`InstrumentServer`) over HiSLIP."""

    def __init__(self, server: InstrumentServer, *, host: str = "127.0.0.1", port: int = 0) -> None:
        self.server = server
        self._sessions: dict[int, _Session] = {}
        self._ids = itertools.count(1)
        self._lock = threading.Lock()
        self._stopping = threading.Event()
        self._tcp = ConnectionServer((host, port), self.serve_channel)
        self._thread: threading.Thread | None = None

    @property
    def port(self) -> int:
        return int(self._tcp.server_address[1])

    def start(self) -> None:
        self._thread = threading.Thread(
            target=self._tcp.serve_forever, kwargs={"poll_interval": 0.05},
            name=f"hislip-{self.server.instrument.role}", daemon=True,
        )  # fmt: skip
        self._thread.start()

    def stop(self) -> None:
        self._stopping.set()
        if self._thread is not None:
            self._tcp.shutdown()
            self._thread.join(timeout=5.0)
        with self._lock:
            sessions, self._sessions = list(self._sessions.values()), {}
        for session in sessions:
            for sock in session.channels:
                _close(sock)
        self._tcp.server_close()

    # -- one connection ------------------------------------------------------------------------
    def serve_channel(self, sock: socket.socket) -> None:
        """The first message says which channel this is; then serve it until it closes."""
        first = read_message(sock)
        if first is None:
            _close(sock)
            return
        kind, _control, parameter, _payload = first
        if kind == INITIALIZE:
            session_id = next(self._ids) & 0xFFFF
            session = _Session(sync=sock, channels=[sock])
            with self._lock:
                self._sessions[session_id] = session
            sock.sendall(pack(INITIALIZE_RESPONSE, 0, (PROTOCOL_VERSION << 16) | session_id))
            self._serve_sync(session_id, session)
        elif kind == ASYNC_INITIALIZE:
            with self._lock:
                session = self._sessions.get(parameter & 0xFFFF)
            if session is None:
                _close(sock)
                return
            session.channels.append(sock)
            sock.sendall(pack(ASYNC_INITIALIZE_RESPONSE, 0, VENDOR))
            self._serve_async(session)
        else:
            _close(sock)

    def _serve_sync(self, session_id: int, session: _Session) -> None:
        sock = session.sync
        try:
            while not self._stopping.is_set():
                message = read_message(sock)
                if message is None:
                    return
                kind, control, parameter, payload = message
                if kind in (DATA, DATA_END):
                    session.partial += payload
                    if len(session.partial) > MAX_LINE:
                        session.partial.clear()
                    if kind == DATA_END and not self._run(session, parameter):
                        return
                elif kind == DEVICE_CLEAR_COMPLETE:
                    session.partial.clear()
                    sock.sendall(pack(DEVICE_CLEAR_ACKNOWLEDGE, control))
                elif kind == TRIGGER:
                    self.server.respond(b"*TRG")
        except OSError:
            return
        finally:
            with self._lock:
                self._sessions.pop(session_id, None)
            for channel in session.channels:
                _close(channel)

    def _run(self, session: _Session, message_id: int) -> bool:
        text = bytes(session.partial).rstrip(b"\r\n")
        session.partial.clear()
        keep, reply = self.server.respond(text)
        if not keep:  # a dropped link: both channels go
            return False
        if reply is not None:
            session.sync.sendall(pack(DATA_END, 0, message_id, reply))
        return True

    def _serve_async(self, session: _Session) -> None:
        sock = session.channels[-1]
        replies = {
            ASYNC_DEVICE_CLEAR: lambda c, p: pack(ASYNC_DEVICE_CLEAR_ACKNOWLEDGE, 0),
            ASYNC_STATUS_QUERY: lambda c, p: pack(ASYNC_STATUS_RESPONSE, self._status_byte()),
            ASYNC_LOCK: lambda c, p: pack(ASYNC_LOCK_RESPONSE, 1),
            ASYNC_LOCK_INFO: lambda c, p: pack(ASYNC_LOCK_INFO_RESPONSE, 0),
            ASYNC_REMOTE_LOCAL_CONTROL: lambda c, p: pack(ASYNC_REMOTE_LOCAL_RESPONSE),
            ASYNC_MAX_MSG_SIZE: lambda c, p: pack(
                ASYNC_MAX_MSG_SIZE_RESPONSE, 0, 0, struct.pack("!Q", MAX_PAYLOAD)
            ),
        }
        try:
            while not self._stopping.is_set():
                message = read_message(sock)
                if message is None:
                    return
                kind, control, parameter, _payload = message
                answer = replies.get(kind)
                if answer is not None:
                    sock.sendall(answer(control, parameter))
        except OSError:
            return

    def _status_byte(self) -> int:
        with self.server.lock:
            return 4 if self.server.instrument.errors else 0  # bit 2: error queue not empty


def _close(sock: socket.socket) -> None:
    with contextlib.suppress(OSError):
        sock.shutdown(socket.SHUT_RDWR)
    sock.close()
