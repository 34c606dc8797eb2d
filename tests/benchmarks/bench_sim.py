"""Benchmark ``sim_capture``: a 4-input x 10,000-sample capture with 64 averages, over the socket.

``ours``: wall time of ``INIT;*OPC?`` plus four ``TRACe:DATA? CHANnel<i>`` block reads from the
simulated digitizer (median of repeated captures).  ``baseline``: the same five requests answered
with the very same reply bytes by a replay server that does no work, over the same loopback socket
and client — i.e. the transfer time of those bytes.  ``ratio`` = ours / baseline.  Goal: under 50 ms.
Two rows: a minimal raw-socket client, and a pyvisa-py (``@py``) session as the drivers use it.
"""

from __future__ import annotations

import socket
import socketserver
import statistics
import threading
import time
from collections.abc import Callable

import numpy as np
import pyvisa

from drivers.sim import board_from_mapping, start_sim_bench

GOAL_MS = 50.0
REPEATS = 30
POINTS = 10_000
AVERAGES = 64
REQUESTS = [b"INIT;*OPC?\n"] + [f"TRAC:DATA? CHAN{i}\n".encode() for i in range(1, 5)]


def _board():
    channel = {"gain_x1": 1.0, "gain_x5": 5.0, "noise_in_mV": 0.3, "saturation_mV": 1500}
    return board_from_mapping(
        {
            "serial": "NR-PA8-BENCH",
            "crosstalk_pct": 1.0,
            "seed": 1,
            "channels": [dict(channel) for _ in range(4)],
        }
    )


def _read_reply(sock: socket.socket, buf: bytearray) -> bytes:
    """One reply: a definite-length block or a line."""
    while len(buf) < 2:
        buf += sock.recv(1 << 20)
    if buf[:1] == b"#":
        n = int(buf[1:2])
        while len(buf) < 2 + n:
            buf += sock.recv(1 << 20)
        total = 2 + n + int(buf[2 : 2 + n]) + 1
    else:
        while b"\n" not in buf:
            buf += sock.recv(1 << 20)
        total = buf.index(b"\n") + 1
    while len(buf) < total:
        buf += sock.recv(1 << 20)
    reply = bytes(buf[:total])
    del buf[:total]
    return reply


def _raw_capture(port: int) -> tuple[Callable[[], list[bytes]], Callable[[], None]]:
    sock = socket.create_connection(("127.0.0.1", port))
    sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    buf = bytearray()

    def capture() -> list[bytes]:
        out = []
        for request in REQUESTS:
            sock.sendall(request)
            out.append(_read_reply(sock, buf))
        return out

    return capture, sock.close


def _pyvisa_capture(
    rm: pyvisa.ResourceManager, port: int
) -> tuple[Callable[[], object], Callable[[], None]]:
    inst = rm.open_resource(
        f"TCPIP0::127.0.0.1::{port}::SOCKET", read_termination="\n", write_termination="\n"
    )
    inst.visalib.sessions[inst.session].interface.setsockopt(
        socket.IPPROTO_TCP, socket.TCP_NODELAY, 1
    )

    def capture() -> object:
        inst.query("INIT;*OPC?")
        return [
            inst.query_binary_values(
                f"TRAC:DATA? CHAN{i}", datatype="h", is_big_endian=True, container=np.array
            )
            for i in range(1, 5)
        ]

    return capture, inst.close


class _Replay(socketserver.ThreadingTCPServer):
    """Answers each request line with a recorded reply: transfer only, no work."""

    daemon_threads = True
    allow_reuse_address = True

    def __init__(self, replies: dict[bytes, bytes]) -> None:
        self.replies = replies
        super().__init__(("127.0.0.1", 0), _ReplayHandler)


class _ReplayHandler(socketserver.StreamRequestHandler):
    def handle(self) -> None:
        self.connection.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        for line in self.rfile:
            self.wfile.write(self.server.replies[line])


def _ask(port: int, request: bytes) -> bytes:
    """One request on a short-lived connection (setup)."""
    with socket.create_connection(("127.0.0.1", port)) as sock:
        sock.sendall(request)
        return _read_reply(sock, bytearray())


def _median_ms(capture: Callable[[], object]) -> float:
    capture()  # warm-up
    times = []
    for _ in range(REPEATS):
        t = time.perf_counter()
        capture()
        times.append(time.perf_counter() - t)
    return statistics.median(times) * 1e3


def _row(name: str, ours: float, baseline: float) -> dict:
    return {
        "name": name,
        "ours": ours,
        "baseline": baseline,
        "unit": "ms",
        "ratio": ours / baseline,
        "goal": f"< {GOAL_MS:g} ms",
        "verdict": "met" if ours < GOAL_MS else "short",
    }


def run() -> list[dict]:
    """Measure both rows; the baseline in the same run."""
    rows = []
    with start_sim_bench(_board()) as bench:
        _ask(bench.ports["switch"], b"ROUT:CLOS (@101,1101,2201,3301,4102);*OPC?\n")
        _ask(bench.ports["pulser"], b"OUTP ON;*OPC?\n")
        _ask(
            bench.ports["scope"],
            f"SENS:SWE:POIN {POINTS};:SENS:AVER:COUN {AVERAGES};*OPC?\n".encode(),
        )
        capture, close = _raw_capture(bench.ports["scope"])
        replies = capture()
        assert all(len(r) > 2 * POINTS for r in replies[1:]), (
            "capture did not return 4 full records"
        )
        ours_raw = _median_ms(capture)
        close()
        rm = pyvisa.ResourceManager("@py")
        capture_v, close_v = _pyvisa_capture(rm, bench.ports["scope"])
        ours_visa = _median_ms(capture_v)
        close_v()
    replay = _Replay(dict(zip(REQUESTS, replies, strict=True)))
    thread = threading.Thread(
        target=replay.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True
    )
    thread.start()
    try:
        capture, close = _raw_capture(replay.server_address[1])
        base_raw = _median_ms(capture)
        close()
        capture_v, close_v = _pyvisa_capture(rm, replay.server_address[1])
        base_visa = _median_ms(capture_v)
        close_v()
    finally:
        replay.shutdown()
        replay.server_close()
        rm.close()
    rows.append(_row("sim_capture", ours_raw, base_raw))
    rows.append(_row("sim_capture_pyvisa", ours_visa, base_visa))
    return rows


if __name__ == "__main__":
    for row in run():
        print(row)
