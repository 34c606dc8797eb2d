"""Determinism (same board + seed + commands = same bytes), the bench file, fixed ports, and
`serve` stopping cleanly on SIGTERM / SIGINT in a real subprocess."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import pyvisa

from drivers.errors import TransportError
from drivers.sim import MAKER, ROLES, start_sim_bench
from drivers.yamlsafe import load_yaml
from tests.drivers.sim.simkit import FakeClock, Sessions, make_board

ROOT = Path(__file__).parents[3]
EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"


def session_bytes(rm: pyvisa.ResourceManager, board) -> list[bytes]:
    """Run one fixed command sequence on a fresh bench; every raw reply in order."""
    clock = FakeClock()
    with start_sim_bench(board, clock=clock) as bench:
        s = Sessions(rm, bench)
        try:
            out = []
            s.switch.query("ROUT:CLOS (@102,1102,2202,3302);*OPC?")
            s.pulser.query("VOLT 0.08;:OUTP ON;*OPC?")
            s.scope.query("SWE:POIN 500;:AVER:COUN 4;*OPC?")
            for _ in range(2):
                s.scope.write("INIT")
                for i in (1, 2, 3):
                    s.scope.write(f"TRAC:DATA? CHAN{i}")
                    out.append(s.scope.read_raw())
            s.threshold.query("SOUR2:VOLT 0.08;*OPC?")
            for _ in range(3):
                out.append(s.counter.query("INIT;:FETC?").encode())
            s.bias.query("VOLT 30;:OUTP ON;*OPC?")
            clock.advance(5.0)
            out.append(s.bias.query("MEAS:VOLT?;:MEAS:CURR?").encode())
            return out
        finally:
            s.close()


def test_same_board_and_seed_give_the_same_bytes(rm):
    board = make_board()
    first, second = session_bytes(rm, board), session_bytes(rm, board)
    assert first == second
    assert first[0] != first[3]  # two captures of one run have independent noise
    other = session_bytes(rm, make_board(seed=8))
    assert other[0] != first[0] and other[-1] != first[-1]


def test_bench_mapping_and_file(tmp_path):
    with start_sim_bench(EXAMPLE, bench_name="bench-sim-1", max_volts=55.0) as bench:
        data = bench.bench_mapping()
        assert data["bench"] == "bench-sim-1" and set(data["instruments"]) == set(ROLES)
        for role, entry in data["instruments"].items():
            assert entry["address"] == f"TCPIP0::127.0.0.1::{bench.ports[role]}::SOCKET"
            assert entry["dialect"] == "generic" and entry["read_termination"] == "\n"
            assert entry["expect_id"].startswith(MAKER + ",")
        assert data["instruments"]["bias"]["max_volts"] == 55.0
        path = bench.write_bench(tmp_path / "bench.yaml")
        loaded = load_yaml(path.read_text(), str(path))
        assert loaded["instruments"]["scope"]["address"] == data["instruments"]["scope"]["address"]
        assert (
            loaded["instruments"]["pulser"]["calibration_due"]
            == data["instruments"]["pulser"]["calibration_due"]
        )


def free_port_base(span: int = len(ROLES)) -> int:
    for _ in range(50):
        with socket.socket() as probe:
            probe.bind(("127.0.0.1", 0))
            base = probe.getsockname()[1]
        if base + span >= 65535:
            continue
        sockets = []
        try:
            for port in range(base, base + span):
                sk = socket.socket()
                sockets.append(sk)
                sk.bind(("127.0.0.1", port))
            return base
        except OSError:
            continue
        finally:
            for sk in sockets:
                sk.close()
    pytest.skip("no block of free ports")


def test_port_base_gives_consecutive_ports_and_a_busy_port_is_a_clear_error():
    base = free_port_base()
    with start_sim_bench(make_board(), port_base=base) as bench:
        assert bench.ports == {role: base + i for i, role in enumerate(ROLES)}
        with pytest.raises(TransportError, match="cannot listen for the simulated pulser"):
            start_sim_bench(make_board(), port_base=base)


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_serve_runs_until_a_signal_and_stops_cleanly(tmp_path, rm, signum):
    bench_file = tmp_path / "bench.yaml"
    code = (
        f"from pathlib import Path; from drivers.sim import serve; "
        f"serve({str(EXAMPLE)!r}, port_base=0, bench_out=Path({str(bench_file)!r}))"
    )
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(
        [sys.executable, "-c", code],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        cwd=ROOT,
    )
    try:
        lines = []
        deadline = time.monotonic() + 20
        while time.monotonic() < deadline:
            line = proc.stdout.readline()
            lines.append(line)
            if "Ctrl-C" in line or not line:
                break
        assert "Ctrl-C" in lines[-1], lines
        data = load_yaml(bench_file.read_text(), str(bench_file))
        address = data["instruments"]["bias"]["address"]
        assert any(address in line for line in lines)  # the addresses are printed
        inst = rm.open_resource(address, read_termination="\n", write_termination="\n")
        assert inst.query("*IDN?").startswith(MAKER)
        inst.close()
        proc.send_signal(signum)
        assert proc.wait(timeout=10) == 0
        assert "stopped" in proc.stderr.read()
        port = int(address.split("::")[2])
        with pytest.raises(OSError), socket.create_connection(("127.0.0.1", port), timeout=1):
            pass
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stdout.close()
        proc.stderr.close()


def test_stop_closes_open_client_connections():
    bench = start_sim_bench(make_board())
    client = socket.create_connection(("127.0.0.1", bench.ports["scope"]), timeout=2)
    try:
        client.sendall(b"*IDN?\n")
        assert client.recv(256).startswith(MAKER.encode())
        bench.stop()
        assert client.recv(256) == b""  # the server closed our connection (a hang: timeout error)
    finally:
        client.close()
        bench.stop()  # idempotent
