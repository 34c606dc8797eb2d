"""A hostile instrument: a real TCP proxy on 127.0.0.1 between the drivers and an instrument.

Every message the drivers send is forwarded to the real instrument (the simulator), and its replies
come back untouched, except for the commands a :class:`Lie` names: those are answered by the proxy
itself, with a reply no honest instrument gives -- NaN or SCPI's 9.91E+37 for a reading, an output
state that contradicts the meter, an interlock that flaps, an endless ``#0`` block, a flood of
newlines, a header announcing 512 MiB.  The real instrument keeps the truth, so a test reads the
supply back from the simulator after the run.

Everything here ends by itself: an endless reply stops when the client closes the link, when the
proxy is stopped, or after ``MAX_FLOOD_S`` -- whichever comes first.
"""

from __future__ import annotations

import contextlib
import socket
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from types import TracebackType

#: No hostile reply runs longer than this (a guard for the test machine, not a bound under test).
MAX_FLOOD_S = 60.0
SCPI_NAN = b"9.91E+37"  # SCPI-1999 Vol. 1 7.2.1.5 (from memory)

#: How a lie answers: it gets the client socket and a callable that says when to give up.
Answer = Callable[[socket.socket, Callable[[], bool]], None]


def text(reply: bytes) -> Answer:
    """One line of text (the terminator is added)."""

    def answer(sock: socket.socket, _done: Callable[[], bool]) -> None:
        sock.sendall(reply + b"\n")

    return answer


def alternating(*replies: bytes) -> Answer:
    """Each call answers the next of ``replies`` in turn (a flapping interlock: b"1", b"0")."""
    turn = [0]

    def answer(sock: socket.socket, _done: Callable[[], bool]) -> None:
        reply = replies[turn[0] % len(replies)]
        turn[0] += 1
        sock.sendall(reply + b"\n")

    return answer


def endless(head: bytes, filler: bytes, *, pause_s: float = 0.0) -> Answer:
    """``head``, then ``filler`` again and again until the client gives up (an endless ``#0``
    block: head ``#0``; a newline flood: filler ``\\n``)."""

    def answer(sock: socket.socket, done: Callable[[], bool]) -> None:
        sock.sendall(head)
        end = time.monotonic() + MAX_FLOOD_S
        while not done() and time.monotonic() < end:
            try:
                sock.sendall(filler)
            except OSError:
                return
            if pause_s:
                time.sleep(pause_s)

    return answer


def header_then_silence(header: bytes) -> Answer:
    """A block header (e.g. ``#9536870912``, 512 MiB) and then nothing at all."""

    def answer(sock: socket.socket, _done: Callable[[], bool]) -> None:
        sock.sendall(header)

    return answer


@dataclass
class Lie:
    """Answer messages starting with ``prefix`` (case-insensitive) with ``answer`` while ``when()``
    holds (default: always); otherwise they reach the real instrument."""

    prefix: str
    answer: Answer
    when: Callable[[], bool] = field(default=lambda: True)
    told: int = 0  # how often the lie was told


class HostileProxy:
    """Listen on 127.0.0.1 (a free port); each client gets its own link to ``upstream``."""

    def __init__(self, upstream: tuple[str, int], lies: list[Lie]) -> None:
        self.upstream = upstream
        self.lies = lies
        self.received: list[str] = []
        self._stop = threading.Event()
        self._listener = socket.create_server(("127.0.0.1", 0))
        self._listener.settimeout(0.05)
        self.port = self._listener.getsockname()[1]
        self._links: list[socket.socket] = []
        self._threads: list[threading.Thread] = []

    @property
    def address(self) -> str:
        return f"TCPIP0::127.0.0.1::{self.port}::SOCKET"

    def __enter__(self) -> HostileProxy:
        self._spawn(self._accept)
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self._stop.set()
        for sock in [self._listener, *self._links]:
            with contextlib.suppress(OSError):
                sock.close()
        for thread in self._threads:
            thread.join(timeout=5.0)

    def _spawn(self, target: Callable[..., None], *args: object) -> None:
        thread = threading.Thread(target=target, args=args, daemon=True)
        self._threads.append(thread)
        thread.start()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                client, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            upstream = socket.create_connection(self.upstream, timeout=5.0)
            for sock in (client, upstream):
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self._links += [client, upstream]
            self._spawn(self._pump, upstream, client)
            self._spawn(self._serve, client, upstream)

    def _pump(self, source: socket.socket, sink: socket.socket) -> None:
        """The real instrument's replies, passed on untouched."""
        source.settimeout(0.05)
        while not self._stop.is_set():
            try:
                data = source.recv(65536)
            except TimeoutError:
                continue
            except OSError:
                break
            if not data:
                break
            try:
                sink.sendall(data)
            except OSError:
                break
        with contextlib.suppress(OSError):
            sink.close()

    def _serve(self, client: socket.socket, upstream: socket.socket) -> None:
        client.settimeout(0.05)
        buffer = b""
        closed = threading.Event()
        done = lambda: self._stop.is_set() or closed.is_set()  # noqa: E731
        while not self._stop.is_set():
            try:
                data = client.recv(65536)
            except TimeoutError:
                continue
            except OSError:
                break
            if not data:
                break
            buffer += data
            while b"\n" in buffer:
                raw, buffer = buffer.split(b"\n", 1)
                line = raw.decode("ascii", "replace").strip()
                self.received.append(line)
                lie = self._lie_for(line)
                try:
                    if lie is None:
                        upstream.sendall(raw + b"\n")
                    else:
                        lie.told += 1
                        self._spawn(self._tell, lie, client, done)
                except OSError:
                    break
        closed.set()
        with contextlib.suppress(OSError):
            upstream.close()

    @staticmethod
    def _tell(lie: Lie, client: socket.socket, done: Callable[[], bool]) -> None:
        with contextlib.suppress(OSError):
            lie.answer(client, done)

    def _lie_for(self, line: str) -> Lie | None:
        for lie in self.lies:
            if line.upper().startswith(lie.prefix.upper()) and lie.when():
                return lie
        return None
