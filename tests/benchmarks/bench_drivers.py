"""Drivers benchmark: trace transfer and query latency through the drivers vs a raw socket.

The peer is a small loopback server in a child process (so it does not share our interpreter lock)
that serves a fixed 1,000,000-sample int16 big-endian block and answers a few SCPI messages.  The
baseline of each row is a plain Python socket (TCP_NODELAY) talking to the same server in the same run.

* ``trace_transfer``: ``Scope.fetch`` (preamble + block + calibration to volts) vs reading the same
  block raw; throughput in MB/s of block bytes, ratio ours/baseline, goal >= 0.25.
* ``query_latency``: a write followed by a query (``ScpiSession``, error checking off so both sides send
  the same two messages) vs the same two messages on a raw socket; median round trip in µs, ratio
  ours/baseline, goal <= 2.
"""

from __future__ import annotations

import multiprocessing as mp
import socket
import statistics
import threading
import time

import numpy as np

from drivers.bench import bench_from_mapping, open_bench
from drivers.scpi.blocks import format_block
from drivers.scpi.session import ScpiSession
from drivers.transport import VisaTransport

SAMPLES = 1_000_000
REPEATS = 25
LATENCY_ROUNDS = 400
PREAMBLE = b"1e-9,0,0.0001,0,1000000,1\n"


def _block() -> bytes:
    codes = (np.arange(SAMPLES, dtype=np.int64) % 65536 - 32768).astype(np.int16)
    return format_block(codes, kind="int16", big_endian=True) + b"\n"


def _serve(ready: mp.connection.Connection) -> None:  # type: ignore[name-defined]
    """Child process: accept clients (one thread each) until a client sends ``QUIT``."""
    block = _block()
    listener = socket.socket()
    listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    listener.bind(("127.0.0.1", 0))
    listener.listen(4)
    listener.settimeout(0.2)
    ready.send(listener.getsockname()[1])
    stop = threading.Event()
    while not stop.is_set():
        try:
            client, _ = listener.accept()
        except TimeoutError:
            continue
        threading.Thread(target=_client, args=(client, block, stop), daemon=True).start()
    listener.close()


def _client(client: socket.socket, block: bytes, stop: threading.Event) -> None:
    client.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    state = {"A": b"0"}
    buf = b""
    with client:
        while True:
            data = client.recv(65536)
            if not data:
                return
            buf += data
            while b"\n" in buf:
                line, buf = buf.split(b"\n", 1)
                if line == b"QUIT":
                    stop.set()
                    return
                # IEEE 488.2 program message units joined by ';' (the drivers join a setting and
                # its error query): one response message, units' responses joined by ';'.
                units = [u.strip().lstrip(b":") for u in line.split(b";")]
                replies = [r.removesuffix(b"\n") for u in units if (r := _reply(u, block, state))]
                if replies:
                    client.sendall(b";".join(replies) + b"\n")


def _reply(line: bytes, block: bytes, state: dict[str, bytes]) -> bytes:
    if line == b"*IDN?":
        return b"Nordlicht Bench,BLK-1,NR-B-0001,1.0\n"
    if line == b"*OPC?":
        return b"1\n"
    if line.startswith(b"SYST") and line.endswith(b"?"):
        return b'0,"No error"\n'
    if line.startswith(b"TRACe:PREamble?"):
        return PREAMBLE
    if line.startswith(b"TRACe:DATA?"):
        return block
    if line == b"A?":
        return state["A"] + b"\n"
    if line.startswith(b"A "):
        state["A"] = line[2:]
    return b""


class _RawClient:
    """The baseline: a plain socket with TCP_NODELAY, reading into a preallocated buffer."""

    def __init__(self, port: int, size: int) -> None:
        self.sock = socket.create_connection(("127.0.0.1", port))
        self.sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        self.buf = bytearray(size)
        self.size = size

    def fetch(self) -> np.ndarray:
        view = memoryview(self.buf)
        self.sock.sendall(b"TRACe:DATA? CHANnel1\n")
        got = 0
        while got < self.size:
            got += self.sock.recv_into(view[got:])
        return np.frombuffer(view[self.size - 1 - 2 * SAMPLES : self.size - 1], dtype=">i2")

    def write_query(self, i: int) -> bytes:
        self.sock.sendall(f"A {i}\n".encode())
        self.sock.sendall(b"A?\n")
        reply = b""
        while not reply.endswith(b"\n"):
            reply += self.sock.recv(4096)
        return reply

    def close(self) -> None:
        self.sock.close()


def _timed(fn, *args) -> float:  # type: ignore[no-untyped-def]
    start = time.perf_counter()
    fn(*args)
    return time.perf_counter() - start


def _measure(port: int, size: int) -> tuple[float, float, float, float]:
    """Medians (s) of raw fetch, drivers fetch, raw write+query, drivers write+query.

    Ours and the baseline alternate, so a busy machine slows both alike.
    """
    address = f"TCPIP0::127.0.0.1::{port}::SOCKET"
    spec = bench_from_mapping(
        {"bench": "benchmark", "instruments": {"scope": {"address": address}}}
    )
    raw = _RawClient(port, size)
    raw_fetch, our_fetch, raw_q, our_q = [], [], [], []
    try:
        with open_bench(spec) as bench, VisaTransport.open(address) as link:
            scope = bench.scope
            session = ScpiSession(link, check_errors=False)

            def ours_query(i: int) -> None:
                session.write(f"A {i}")
                session.query("A?")

            for _ in range(REPEATS):
                raw_fetch.append(_timed(raw.fetch))
                our_fetch.append(_timed(scope.fetch, 1))
            assert len(scope.fetch(1)) == SAMPLES and len(raw.fetch()) == SAMPLES
            for i in range(LATENCY_ROUNDS):
                raw_q.append(_timed(raw.write_query, i))
                our_q.append(_timed(ours_query, i))
    finally:
        raw.close()
    med = statistics.median
    return med(raw_fetch), med(our_fetch), med(raw_q[20:]), med(our_q[20:])


def run() -> list[dict]:
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe()
    server = ctx.Process(target=_serve, args=(child,), daemon=True)
    server.start()
    try:
        port = parent.recv() if parent.poll(30) else None
        if port is None:
            raise RuntimeError("benchmark server did not start")
        size = len(_block())
        raw_s, ours_s, raw_lat, ours_lat = _measure(port, size)
        with socket.create_connection(("127.0.0.1", port)) as s:
            s.sendall(b"QUIT\n")
    finally:
        server.join(timeout=5)
        if server.is_alive():
            server.terminate()
            server.join(timeout=5)
    ours_mbs, raw_mbs = size / ours_s / 1e6, size / raw_s / 1e6
    transfer_ratio = ours_mbs / raw_mbs
    latency_ratio = ours_lat / raw_lat
    return [
        {
            "name": "trace_transfer",
            "ours": round(ours_mbs, 1),
            "baseline": round(raw_mbs, 1),
            "unit": "MB/s",
            "ratio": round(transfer_ratio, 3),
            "goal": ">= 0.25",
            "verdict": "met" if transfer_ratio >= 0.25 else "short",
        },
        {
            "name": "query_latency",
            "ours": round(ours_lat * 1e6, 1),
            "baseline": round(raw_lat * 1e6, 1),
            "unit": "us",
            "ratio": round(latency_ratio, 3),
            "goal": "<= 2",
            "verdict": "met" if latency_ratio <= 2 else "short",
        },
    ]
