"""A threaded TCP server for one simulated instrument (newline-terminated SCPI messages).

One thread per client connection; all instruments of a bench share one lock, so several clients and
the cross-wired instruments (the counter reads the pulser, switch and threshold) see one consistent
state.  Accepted sockets get ``TCP_NODELAY``; each response message goes out in one ``sendall``.
``\\r\\n`` is accepted as a terminator too.  A line longer than :data:`MAX_LINE` is discarded with
``-223,"Too much data"``.
"""

from __future__ import annotations

import contextlib
import socket
import threading

from drivers.sim.faults import FaultRunner
from drivers.sim.instrument import SimInstrument
from drivers.sim.tcp_serving import ConnectionServer

MAX_LINE = 1 << 20


class InstrumentServer:
    """Serves one :class:`SimInstrument` on ``host:port`` (port 0 = a free ephemeral port)."""

    def __init__(
        self,
        instrument: SimInstrument,
        *,
        lock: threading.Lock,
        faults: FaultRunner,
        host: str = "127.0.0.1",
        port: int = 0,
    ) -> None:
        self.instrument = instrument
        self.lock = lock
        self.faults = faults
        self._stopping = threading.Event()
        self._clients: dict[socket.socket, threading.Thread] = {}
        self._clients_lock = threading.Lock()
        self._tcp = ConnectionServer((host, port), self._serve_tracked)
        self._thread: threading.Thread | None = None
        instrument.sleep = self._sleep_unlocked

    def _serve_tracked(self, sock: socket.socket) -> None:
        """Serves one client, known to :meth:`stop` (which closes and joins it) while it lasts."""
        self.track(sock, True)
        try:
            self.serve_client(sock)
        finally:
            self.track(sock, False)

    @property
    def port(self) -> int:
        """The TCP port the server listens on."""
        return int(self._tcp.server_address[1])

    def start(self) -> None:
        """Start accepting clients in a background (daemon) thread."""
        self._thread = threading.Thread(
            target=self._tcp.serve_forever,
            kwargs={"poll_interval": 0.05},
            name=f"sim-{self.instrument.role}",
            daemon=True,
        )
        self._thread.start()

    def stop(self) -> None:
        """Stop accepting, close every client connection and wait for their threads (each <= 5 s)."""
        self._stopping.set()
        if self._thread is not None:
            self._tcp.shutdown()
            self._thread.join(timeout=5.0)
        with self._clients_lock:
            clients = list(self._clients.items())
        for sock, _ in clients:
            _close(sock)
        for _, thread in clients:  # the client threads end once their socket is closed
            thread.join(timeout=5.0)
        self._tcp.server_close()

    def track(self, sock: socket.socket, alive: bool) -> None:
        """Remember open client sockets so :meth:`stop` can close them."""
        with self._clients_lock:
            if alive:
                self._clients[sock] = threading.current_thread()
            else:
                self._clients.pop(sock, None)

    def _sleep_unlocked(self, seconds: float) -> None:
        """Wait without holding the bench lock (the handler calling this holds it once)."""
        self.lock.release()
        try:
            self._stopping.wait(seconds)
        finally:
            self.lock.acquire()

    def serve_client(self, sock: socket.socket) -> None:
        """Read lines until the client leaves; answer each program message."""
        buffer = bytearray()
        while not self._stopping.is_set():
            try:
                chunk = sock.recv(65536)
            except OSError:
                return
            if not chunk:
                return
            buffer += chunk
            while (end := buffer.find(b"\n")) >= 0:
                line = bytes(buffer[:end]).rstrip(b"\r")
                del buffer[: end + 1]
                if not self._answer(sock, line):
                    _close(sock)
                    return
            if len(buffer) > MAX_LINE:
                buffer.clear()
                with self.lock:
                    self.instrument.push_error(-223, "Too much data")

    def respond(self, message: bytes) -> tuple[bool, bytes | None]:
        """Run one program message through the faults and the instrument: (keep the link, the
        reply or None).  Shared by every link kind (raw socket here, HiSLIP in ``hislip.py``).
        Each message costs the instrument's round trip on the bench's clock (waited for, less the
        time it already took, when the clock runs in real time)."""
        pace = self.instrument.pace
        started = pace.mark()
        try:
            return self._respond(message)
        finally:
            wait = pace.spend("round_trip", self.instrument.timing.round_trip_s, since=started)
            if wait > 0:
                self._stopping.wait(wait)

    def _respond(self, message: bytes) -> tuple[bool, bytes | None]:
        with self.lock:
            effect = self.faults.on_message(message)
            if effect.disconnect:
                return False, None
            for code, text in effect.errors:
                self.instrument.push_error(code, text)
            if effect.silent:
                return True, None
            reply = self.instrument.process(message.decode("latin-1"))
            if reply is not None:
                reply = self.faults.filter_reply(reply)
        return True, reply

    def _answer(self, sock: socket.socket, line: bytes) -> bool:
        """Run one message and send its reply; False if the connection must close."""
        keep, reply = self.respond(line)
        if not keep:
            return False
        if reply is not None:
            try:
                sock.sendall(reply)
            except OSError:
                return False
        return True


def _close(sock: socket.socket) -> None:
    with contextlib.suppress(OSError):  # already shut down by the peer
        sock.shutdown(socket.SHUT_RDWR)
    sock.close()
