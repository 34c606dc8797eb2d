"""The simulated instruments over VXI-11 (the core channel: ONC RPC over TCP), so tests exercise
``TCPIP0::127.0.0.1,PORT::inst0::INSTR`` resources through pyvisa, beside raw sockets and HiSLIP.

No portmapper: pyvisa-py's VXI-11 client (``pyvisa_py.tcpip.TCPIPInstrVxi11.after_parsing``, read in
the installed 0.8 source) takes an explicit port written after the host, ``host,port``, and then
connects straight to it, bypassing the portmapper on port 111.  So the server listens on a free,
unprivileged port and the bench file names it; nothing here needs root.

What is served (VXI-11 rev. 1.0 and ONC RPC v2, RFC 5531/1831; procedure numbers and XDR layouts from
memory, cross-checked against the constants and packers of ``pyvisa_py.protocols.vxi11``):

* record marking (RFC 5531 §11): each RPC message in fragments behind a 4-byte length whose top bit
  marks the last one; the call header carries the transaction id echoed in the reply;
* ``create_link`` (a link id, no abort channel: port 0), ``destroy_link``;
* ``device_write``: data accumulate until a write with the END flag; the message then runs through
  the same faults and instrument as the raw-socket server (:meth:`InstrumentServer.respond`);
* ``device_read``: up to ``requestSize`` bytes of the pending reply; with the TERMCHAR_SET flag the
  read ends after the term character (reason CHR), as a real device does; the last byte of a reply
  carries END; no reply pending waits the client's I/O timeout and answers ``io_timeout``;
* ``device_readstb``, trigger, clear (discards pending input and output), remote, local, lock and
  unlock are answered; other procedures are ``operation_not_supported`` (interrupt channel, docmd).

A ``disconnect`` fault closes the TCP connection -- what a dropped VXI-11 link looks like.

XDR packing and unpacking use ``pyvisa_py.protocols.rpc`` (already a dependency) rather than our own
code: the same coder the client uses, so the bytes agree by construction only where the standard
agrees -- the procedure layouts on the server side are written here.
"""

from __future__ import annotations

import contextlib
import itertools
import socket
import struct
import threading
from collections.abc import Callable
from dataclasses import dataclass, field

from pyvisa_py.protocols import rpc

from drivers.sim.server import MAX_LINE, InstrumentServer
from drivers.sim.tcp_serving import ConnectionServer, receive_exactly

#: VXI-11 core channel program and version (VXI-11 rev 1.0, B.6).
DEVICE_CORE_PROG, DEVICE_CORE_VERS = 0x0607AF, 1
CREATE_LINK, DEVICE_WRITE, DEVICE_READ, DEVICE_READSTB = 10, 11, 12, 13
DEVICE_TRIGGER, DEVICE_CLEAR, DEVICE_REMOTE, DEVICE_LOCAL = 14, 15, 16, 17
DEVICE_LOCK, DEVICE_UNLOCK, DEVICE_ENABLE_SRQ, DEVICE_DOCMD = 18, 19, 20, 22
DESTROY_LINK, CREATE_INTR_CHAN, DESTROY_INTR_CHAN = 23, 25, 26
# device error codes
NO_ERROR, INVALID_LINK, OPERATION_NOT_SUPPORTED, IO_TIMEOUT = 0, 4, 8, 15
# device_write / device_read flags and read reasons
FLAG_END, FLAG_TERMCHAR_SET = 0x08, 0x80
REASON_REQCNT, REASON_CHR, REASON_END = 0x01, 0x02, 0x04
#: The largest write the client may send in one call (and the largest read we answer).
MAX_RECV_SIZE = 1 << 20
#: A record longer than this is not a client we serve.
MAX_RECORD = MAX_RECV_SIZE + 4096
_FRAGMENT = struct.Struct(">I")
# ONC RPC accept states (RFC 5531 §9)
PROG_UNAVAIL, PROG_MISMATCH, PROC_UNAVAIL, GARBAGE_ARGS = 1, 2, 3, 4


@dataclass
class _Link:
    partial: bytearray = field(default_factory=bytearray)
    output: bytearray = field(default_factory=bytearray)


class _Drop(Exception):
    """The connection is to close (a disconnect fault, or a client we cannot follow)."""


def read_record(sock: socket.socket) -> bytes | None:
    """One RPC record (its fragments joined); None at end of stream or on a record too long."""
    record = bytearray()
    while True:
        head = receive_exactly(sock, 4)
        if head is None:
            return None
        (word,) = _FRAGMENT.unpack(head)
        length = word & 0x7FFF_FFFF
        if len(record) + length > MAX_RECORD:
            return None
        body = receive_exactly(sock, length) if length else b""
        if body is None:
            return None
        record += body
        if word & 0x8000_0000:
            return bytes(record)


def send_record(sock: socket.socket, record: bytes) -> None:
    """One RPC record in one fragment."""
    sock.sendall(_FRAGMENT.pack(0x8000_0000 | len(record)) + record)


class Vxi11Server:
    """Serves one instrument (through its raw-socket :class:`InstrumentServer`) over VXI-11."""

    def __init__(self, server: InstrumentServer, *, host: str = "127.0.0.1", port: int = 0) -> None:
        self.server = server
        self._links: dict[int, _Link] = {}
        self._ids = itertools.count(1)
        self._lock = threading.Lock()
        self._stopping = threading.Event()
        self._connections: set[socket.socket] = set()
        self._tcp = ConnectionServer((host, port), self.serve_connection)
        self._thread: threading.Thread | None = None
        self._procedures: dict[int, Callable[[rpc.Unpacker, rpc.Packer], None]] = {
            CREATE_LINK: self._create_link,
            DEVICE_WRITE: self._device_write,
            DEVICE_READ: self._device_read,
            DEVICE_READSTB: self._device_readstb,
            DEVICE_TRIGGER: self._generic(lambda link: self._run(link, b"*TRG")),
            DEVICE_CLEAR: self._generic(self._clear),
            DEVICE_REMOTE: self._generic(lambda link: None),
            DEVICE_LOCAL: self._generic(lambda link: None),
            DEVICE_LOCK: self._device_lock,
            DEVICE_UNLOCK: self._link_only(lambda link: None),
            DESTROY_LINK: self._link_only(self._destroy),
        }

    @property
    def port(self) -> int:
        return int(self._tcp.server_address[1])

    def start(self) -> None:
        self._thread = threading.Thread(
            target=self._tcp.serve_forever, kwargs={"poll_interval": 0.05},
            name=f"vxi11-{self.server.instrument.role}", daemon=True,
        )  # fmt: skip
        self._thread.start()

    def stop(self) -> None:
        self._stopping.set()
        if self._thread is not None:
            self._tcp.shutdown()
            self._thread.join(timeout=5.0)
        with self._lock:
            connections, self._connections = list(self._connections), set()
            self._links.clear()
        for sock in connections:
            _close(sock)
        self._tcp.server_close()

    # -- one connection ------------------------------------------------------------------------
    def serve_connection(self, sock: socket.socket) -> None:
        """Answer RPC calls until the client leaves (or a fault drops the connection)."""
        owned: set[int] = set()  # links created on this connection, destroyed when it closes
        with self._lock:
            self._connections.add(sock)
        try:
            while not self._stopping.is_set():
                record = read_record(sock)
                if record is None:
                    return
                reply = self._answer(record, owned)
                if reply is not None:
                    send_record(sock, reply)
        except (_Drop, OSError):
            return
        finally:
            with self._lock:
                self._connections.discard(sock)
                for link in owned:
                    self._links.pop(link, None)
            _close(sock)

    def _answer(self, record: bytes, owned: set[int]) -> bytes | None:
        calls = rpc.Unpacker(record)
        try:
            xid, prog, vers, proc, _cred, _verf = calls.unpack_callheader()
        except (rpc.RPCError, EOFError, struct.error):
            raise _Drop from None  # not an RPC call: nothing sane to answer
        replies = rpc.Packer()
        if prog != DEVICE_CORE_PROG:
            return _rejected(xid, PROG_UNAVAIL)
        if vers != DEVICE_CORE_VERS:
            return _rejected(xid, PROG_MISMATCH, (DEVICE_CORE_VERS, DEVICE_CORE_VERS))
        procedure = self._procedures.get(proc)
        if procedure is None:
            if proc in (DEVICE_ENABLE_SRQ, DEVICE_DOCMD, CREATE_INTR_CHAN, DESTROY_INTR_CHAN):
                replies.pack_replyheader(xid, (rpc.AuthorizationFlavor.null, b""))
                replies.pack_int(OPERATION_NOT_SUPPORTED)
                if proc == DEVICE_DOCMD:
                    replies.pack_opaque(b"")
                return replies.get_buffer()
            return _rejected(xid, PROC_UNAVAIL)
        replies.pack_replyheader(xid, (rpc.AuthorizationFlavor.null, b""))
        try:
            if proc == CREATE_LINK:
                self._create_link(calls, replies, owned)
            else:
                procedure(calls, replies)
        except (EOFError, struct.error, ValueError):
            return _rejected(xid, GARBAGE_ARGS)
        return replies.get_buffer()

    # -- procedures ----------------------------------------------------------------------------
    def _create_link(
        self, calls: rpc.Unpacker, replies: rpc.Packer, owned: set[int] | None = None
    ) -> None:
        calls.unpack_int()  # client id
        calls.unpack_bool()  # lock device
        calls.unpack_uint()  # lock timeout
        calls.unpack_string()  # device name (inst0, ...): one instrument per server
        link_id = next(self._ids) & 0x7FFF_FFFF
        with self._lock:
            self._links[link_id] = _Link()
        if owned is not None:
            owned.add(link_id)
        replies.pack_int(NO_ERROR)
        replies.pack_int(link_id)
        replies.pack_uint(0)  # abort port: no abort channel served
        replies.pack_uint(MAX_RECV_SIZE)

    def _device_write(self, calls: rpc.Unpacker, replies: rpc.Packer) -> None:
        link_id = calls.unpack_int()
        calls.unpack_uint()  # io timeout
        calls.unpack_uint()  # lock timeout
        flags = calls.unpack_int()
        data = calls.unpack_opaque()
        link = self._link(link_id)
        if link is None:
            replies.pack_int(INVALID_LINK)
            replies.pack_uint(0)
            return
        link.partial += data
        if len(link.partial) > MAX_LINE:
            link.partial.clear()
        if flags & FLAG_END:
            message = bytes(link.partial).rstrip(b"\r\n")
            link.partial.clear()
            self._run(link, message)
        replies.pack_int(NO_ERROR)
        replies.pack_uint(len(data))

    def _device_read(self, calls: rpc.Unpacker, replies: rpc.Packer) -> None:
        link_id = calls.unpack_int()
        request_size = calls.unpack_uint()
        io_timeout_ms = calls.unpack_uint()
        calls.unpack_uint()  # lock timeout
        flags = calls.unpack_int()
        term_char = calls.unpack_int() & 0xFF
        link = self._link(link_id)
        if link is None:
            replies.pack_int(INVALID_LINK)
            replies.pack_int(0)
            replies.pack_opaque(b"")
            return
        if not link.output:
            # replies are made when a message ends, so none will come: the device's I/O timeout
            self._stopping.wait(min(io_timeout_ms, 60_000) / 1000.0)
            replies.pack_int(IO_TIMEOUT)
            replies.pack_int(0)
            replies.pack_opaque(b"")
            return
        size = max(1, min(request_size, MAX_RECV_SIZE))
        reason = 0
        if flags & FLAG_TERMCHAR_SET:
            at = link.output.find(bytes([term_char]), 0, size)
            if at >= 0:
                size, reason = at + 1, REASON_CHR
        chunk = bytes(link.output[:size])
        del link.output[:size]
        if not link.output:
            reason |= REASON_END
        elif not reason:
            reason = REASON_REQCNT
        replies.pack_int(NO_ERROR)
        replies.pack_int(reason)
        replies.pack_opaque(chunk)

    def _device_readstb(self, calls: rpc.Unpacker, replies: rpc.Packer) -> None:
        link_id = _generic_parms(calls)
        if self._link(link_id) is None:
            replies.pack_int(INVALID_LINK)
            replies.pack_uint(0)
            return
        with self.server.lock:
            stb = 4 if self.server.instrument.errors else 0  # bit 2: error queue not empty
        replies.pack_int(NO_ERROR)
        replies.pack_uint(stb)

    def _device_lock(self, calls: rpc.Unpacker, replies: rpc.Packer) -> None:
        link_id = calls.unpack_int()
        calls.unpack_int()  # flags
        calls.unpack_uint()  # lock timeout
        replies.pack_int(NO_ERROR if self._link(link_id) is not None else INVALID_LINK)

    def _generic(
        self, action: Callable[[_Link], None]
    ) -> Callable[[rpc.Unpacker, rpc.Packer], None]:
        def procedure(calls: rpc.Unpacker, replies: rpc.Packer) -> None:
            link = self._link(_generic_parms(calls))
            if link is None:
                replies.pack_int(INVALID_LINK)
                return
            action(link)
            replies.pack_int(NO_ERROR)

        return procedure

    def _link_only(
        self, action: Callable[[int], None]
    ) -> Callable[[rpc.Unpacker, rpc.Packer], None]:
        def procedure(calls: rpc.Unpacker, replies: rpc.Packer) -> None:
            link_id = calls.unpack_int()
            if self._link(link_id) is None:
                replies.pack_int(INVALID_LINK)
                return
            action(link_id)
            replies.pack_int(NO_ERROR)

        return procedure

    # -- helpers -------------------------------------------------------------------------------
    def _link(self, link_id: int) -> _Link | None:
        with self._lock:
            return self._links.get(link_id)

    def _run(self, link: _Link, message: bytes) -> None:
        keep, reply = self.server.respond(message)
        if not keep:
            raise _Drop
        if reply is not None:
            link.output += reply

    @staticmethod
    def _clear(link: _Link) -> None:
        link.partial.clear()
        link.output.clear()

    def _destroy(self, link_id: int) -> None:
        with self._lock:
            self._links.pop(link_id, None)


def _generic_parms(calls: rpc.Unpacker) -> int:
    """Device_GenericParms: the link id (flags, lock and I/O timeouts read and ignored)."""
    link_id = calls.unpack_int()
    calls.unpack_int()
    calls.unpack_uint()
    calls.unpack_uint()
    return int(link_id)


def _rejected(xid: int, status: int, mismatch: tuple[int, int] | None = None) -> bytes:
    """An accepted reply whose accept state is not success (RFC 5531 §9)."""
    replies = rpc.Packer()
    replies.pack_uint(xid)
    replies.pack_enum(rpc.MessagegType.reply)
    replies.pack_uint(rpc.ReplyStatus.accepted)
    replies.pack_auth((rpc.AuthorizationFlavor.null, b""))
    replies.pack_enum(status)
    if mismatch is not None:
        replies.pack_uint(mismatch[0])
        replies.pack_uint(mismatch[1])
    return replies.get_buffer()


def _close(sock: socket.socket) -> None:
    with contextlib.suppress(OSError):
        sock.shutdown(socket.SHUT_RDWR)
    sock.close()
