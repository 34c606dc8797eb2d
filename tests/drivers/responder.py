"""A small threaded SCPI responder on 127.0.0.1 for integration tests and benchmarks.

Not the simulator: it stores what it is told (``HEADER value`` sets, ``HEADER?`` reads back), keeps an
error queue, answers the IEEE 488.2 common commands and lets a test plug in replies for special
commands (binary blocks, slow replies, dropped links).  Every instance must be stopped (context manager).
"""

from __future__ import annotations

import contextlib
import socket
import threading
import time
from collections.abc import Callable
from types import TracebackType

Reply = bytes | list[bytes] | None  # a list is sent as separate TCP segments, 2 ms apart
Special = Callable[[str, "SimpleInstrument"], Reply]


class DropLink(Exception):
    """Raised by a special handler: the responder closes this client's connection."""


UNDEFINED_HEADER = (
    -113,
    "Undefined header",
)  # SCPI-1999 vol. 2, §21.8 command errors (from memory)


class SimpleInstrument:
    """State of one responder: settings by header, an error queue, special handlers."""

    def __init__(self, idn: str = "Nordlicht Test,RESP-1,NR-R-0001,0.1") -> None:
        self.idn = idn
        self.settings: dict[str, str] = {}
        self.errors: list[tuple[int, str]] = []
        self.special: dict[str, Special] = {}
        self.known: set[str] | None = None  # when set, other set-headers queue -113
        self.lock = threading.Lock()

    def handle(self, line: str) -> Reply:
        line = line.strip()
        if not line:
            return None
        header, _, arg = line.partition(" ")
        key = header.upper()
        for prefix, fn in self.special.items():
            if line.upper().startswith(prefix.upper()):
                return fn(line, self)
        if key == "*IDN?":
            return self.idn.encode() + b"\n"
        if key == "*OPC?":
            return b"1\n"
        if key in ("*CLS",):
            self.errors.clear()
            return None
        if key in ("*RST", "*TRG"):
            return None
        if key.startswith("SYST") and key.endswith("?") and "ERR" in key:
            code, msg = self.errors.pop(0) if self.errors else (0, "No error")
            return f'{code},"{msg}"\n'.encode()
        if key.endswith("?"):
            name = key[:-1] + (" " + arg.upper() if arg else "")
            return (self.settings.get(name, "0") + "\n").encode()
        if self.known is not None and key not in self.known:
            self.errors.append(UNDEFINED_HEADER)
            return None
        self.settings[key] = arg
        return None


class Responder:
    """Serve one :class:`SimpleInstrument` on 127.0.0.1 (any free port), one thread per client."""

    def __init__(self, instrument: SimpleInstrument | None = None) -> None:
        self.instrument = instrument or SimpleInstrument()
        self.received: list[str] = []
        self.accepted = 0
        self._stop = threading.Event()
        self._listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._listener.bind(("127.0.0.1", 0))
        self._listener.listen(8)
        self._listener.settimeout(0.05)
        self.port = self._listener.getsockname()[1]
        self._clients: list[socket.socket] = []
        self._threads: list[threading.Thread] = []
        self._accept_thread = threading.Thread(target=self._accept, daemon=True)

    @property
    def address(self) -> str:
        return f"TCPIP0::127.0.0.1::{self.port}::SOCKET"

    def start(self) -> Responder:
        self._accept_thread.start()
        return self

    def drop_clients(self) -> None:
        """Drop every client connection (a dropped LAN link, seen from the instrument).  Shut down
        only: each serving thread closes its own socket when it sees the end, so no thread is left
        using a file descriptor another one closed (the warning seen at teardown)."""
        for client in list(self._clients):
            with contextlib.suppress(OSError):
                client.shutdown(socket.SHUT_RDWR)
        self._clients.clear()

    def stop(self) -> None:
        self._stop.set()
        self.drop_clients()
        self._listener.close()
        for thread in [self._accept_thread, *self._threads]:
            if thread.is_alive():
                thread.join(timeout=2.0)

    def __enter__(self) -> Responder:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                client, _ = self._listener.accept()
            except TimeoutError:
                continue
            except OSError:
                return
            client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self.accepted += 1
            self._clients.append(client)
            thread = threading.Thread(target=self._serve, args=(client,), daemon=True)
            self._threads.append(thread)
            thread.start()

    def _answer(self, line: str) -> Reply:
        """One program message: a plain line as it is; ``;``-joined units (a leading ``:`` read
        from the root) each handled and recorded in turn, their replies joined (IEEE 488.2 §7.3)."""
        units = [line] if ";" not in line else [u.strip().removeprefix(":") for u in line.split(";")]
        replies: list[Reply] = []
        for unit in units:
            self.received.append(unit.strip())
            with self.instrument.lock:
                replies.append(self.instrument.handle(unit))
        return replies[0] if len(units) == 1 else _joined(replies)

    def _serve(self, client: socket.socket) -> None:
        try:
            self._serve_client(client)
        except OSError:  # shut down under it (drop_clients, stop): the link is gone
            pass
        finally:
            client.close()

    def _serve_client(self, client: socket.socket) -> None:
        client.settimeout(0.05)
        buffer = b""
        while not self._stop.is_set():
            try:
                data = client.recv(65536)
            except TimeoutError:
                continue
            except OSError:
                return
            if not data:
                return
            buffer += data
            while b"\n" in buffer:
                raw, buffer = buffer.split(b"\n", 1)
                line = raw.decode("ascii", "replace")
                try:
                    reply = self._answer(line)
                except DropLink:
                    return  # closed by _serve
                if not reply:
                    continue
                try:
                    if isinstance(reply, list):
                        for piece in reply:
                            client.sendall(piece)
                            time.sleep(0.002)
                    else:
                        client.sendall(reply)
                except OSError:
                    return


def _joined(replies: list[Reply]) -> Reply:
    """The replies of one program message's queries as one response message (``;``-joined)."""
    texts = [r for r in replies if r]
    if len(texts) <= 1:
        return texts[0] if texts else None
    parts = [b"".join(r) if isinstance(r, list) else r for r in texts]
    return b";".join(p.rstrip(b"\n") for p in parts) + b"\n"


def wait_until(predicate: Callable[[], bool], timeout_s: float = 2.0) -> bool:
    """Poll ``predicate`` until true or ``timeout_s`` passes (bounded)."""
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.005)
    return predicate()
