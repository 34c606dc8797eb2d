"""One threaded TCP listener for every simulated link (raw socket, HiSLIP, VXI-11).

Each accepted connection gets Nagle off (a simulated instrument answers at once, as a LAN instrument's
stack does) and is handed to the link's own ``serve`` callable on its own daemon thread. The three
servers had each carried a copy of this; the link protocols differ, the listening does not."""

from __future__ import annotations

import socket
import socketserver
from collections.abc import Callable


class _Handler(socketserver.BaseRequestHandler):
    server: ConnectionServer

    def handle(self) -> None:
        sock: socket.socket = self.request
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.server.serve(sock)


class ConnectionServer(socketserver.ThreadingTCPServer):
    """Listens on ``address`` (port 0 = a free ephemeral port) and calls ``serve(sock)`` per connection."""

    allow_reuse_address = True
    daemon_threads = True
    block_on_close = False  # a link's own stop() closes and joins its clients

    def __init__(self, address: tuple[str, int], serve: Callable[[socket.socket], None]) -> None:
        self.serve = serve
        super().__init__(address, _Handler)


def receive_exactly(sock: socket.socket, n: int) -> bytes | None:
    """``n`` bytes from ``sock``; None when the peer closes or the socket fails first."""
    data = bytearray()
    while len(data) < n:
        try:
            chunk = sock.recv(n - len(data))
        except OSError:
            return None
        if not chunk:
            return None
        data += chunk
    return bytes(data)
