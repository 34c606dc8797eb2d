"""INSTR links: the simulated instruments over HiSLIP (IVI-6.1) and VXI-11 through pyvisa-py, beside
raw sockets.

Checked from outside: every role identifies and a scope record arrives whole over each; an
indefinite-length ``#0`` block (IEEE 488.2 §8.7.9.4, from memory: data up to the END of the message)
keeps its newline bytes over an INSTR link (a VXI-11 device ends a read at the term character
when the client asks it to, VXI-11 rev 1.0 B.6.12, from memory); a dropped session surfaces as our
``ConnectionClosed`` (pyvisa-py raises plain socket or ``RuntimeError`` errors), the session
reconnects and re-applies its settings; and a link dropped while the bias is live ends the run with
exit 3, one line naming the dropped link, and 0 V / output off read back when the link returns.
"""

from __future__ import annotations

import threading
from pathlib import Path

import numpy as np
import pytest

from drivers.bench import bench_from_mapping, open_bench
from drivers.errors import ConnectionClosed, TransportError
from drivers.scpi.session import ScpiSession
from drivers.sim import start_sim_bench
from drivers.sim.faults import FaultRunner
from drivers.sim.hislip import HislipServer
from drivers.sim.instrument import SimInstrument, command
from drivers.sim.server import InstrumentServer
from drivers.sim.vxi11 import Vxi11Server
from drivers.transport import VisaTransport
from tests.integration.safety_cli import (
    last_line,
    run_args,
    run_cli,
    second_session,
    sim_bench,
    supply_state,
    the_run,
    write_board,
    write_procedure,
)

EXAMPLE = Path(__file__).resolve().parents[2] / "drivers" / "sim" / "boards" / "example-pa8.yaml"
EXIT_ABORT = 3  # DESIGN.md exit codes
TOL = 0.1  # V, the engine's ramp tolerance


INSTR_LINKS = {"hislip": "::hislip0,", "vxi11": ",{port}::inst0::INSTR"}


@pytest.mark.parametrize("link", sorted(INSTR_LINKS))
def test_every_role_identifies_and_a_record_arrives_over_instr_links(link):
    with start_sim_bench(EXAMPLE) as sim:
        mapping = sim.bench_mapping(link=link)
        marker = INSTR_LINKS[link].split("{")[0]
        assert all(marker in e["address"] for e in mapping["instruments"].values())
        spec = bench_from_mapping(mapping)
        with open_bench(spec) as bench:
            assert sorted(bench.identities()) == sorted(spec.instruments)
            bench.scope.set_input(1, range_mV=1000.0)
            bench.scope.set_timebase(sample_rate_hz=1e9, points=20_000, pretrigger_ns=100.0)
            trace = bench.scope.capture([1])[0]
            assert len(trace.volts) == 20_000 and np.all(np.isfinite(trace.volts))


class BlockSource(SimInstrument):
    """Answers ``DATA?`` with an indefinite-length block whose data hold newline bytes."""

    role = "scope"
    model = "BLOCK-1"
    payload = bytes(range(256)) * 4  # 0x0A appears four times

    def commands(self):
        return [command("DATA", query=lambda c: b"#0" + self.payload)]


def serve_instr(instrument: SimInstrument, link: str, faults=()):
    """``instrument`` served over ``link`` (hislip or vxi11): (stop callable, VISA address)."""
    server = InstrumentServer(
        instrument, lock=threading.Lock(), faults=FaultRunner(faults, lambda: 0.0)
    )
    front = HislipServer(server) if link == "hislip" else Vxi11Server(server)
    front.start()
    if link == "hislip":
        address = f"TCPIP0::127.0.0.1::hislip0,{front.port}::INSTR"
    else:
        address = f"TCPIP0::127.0.0.1,{front.port}::inst0::INSTR"

    def stop() -> None:
        front.stop()
        server.stop()

    return stop, address


@pytest.mark.parametrize("link", sorted(INSTR_LINKS))
def test_an_indefinite_block_keeps_its_newline_bytes_over_instr_links(link):
    stop, address = serve_instr(BlockSource(instrument_id=1, serial="B-1"), link)
    try:
        with ScpiSession(VisaTransport.open(address, timeout_ms=3000)) as session:
            assert session.query_block_bytes("DATA?") == BlockSource.payload
            assert session.query("*OPC?") == "1"  # in step after the block
    finally:
        stop()


@pytest.mark.parametrize("link", sorted(INSTR_LINKS))
def test_a_dropped_instr_session_is_a_closed_link_and_reconnects(tmp_path, link):
    # the supply closes its session once, after its 3rd message (pyvisa-py raises RuntimeError
    # "Connection was dropped by server." on the next HiSLIP read; its VXI-11 client reports an
    # I/O error once the RPC reply does not come)
    board = write_board(
        tmp_path, faults=[{"kind": "disconnect", "role": "bias", "after_commands": 3}]
    )
    with start_sim_bench(board) as sim:
        mapping = sim.bench_mapping(link=link)
        mapping["instruments"]["bias"]["timeout_ms"] = 1000  # a dead VXI-11 link costs one timeout
        spec = bench_from_mapping(mapping)
        with open_bench(spec, roles=["bias"]) as bench:
            session = bench.bias.session
            session.retries = 0  # see the raw failure first
            outcomes = []
            for _ in range(4):
                try:
                    outcomes.append(bench.bias.output_on())
                except TransportError as exc:
                    outcomes.append(type(exc))
            assert ConnectionClosed in outcomes  # never RuntimeError or an internal error
            assert outcomes[-1] is False  # the next call reopened the session and read back
            assert session.reconnects == 1


@pytest.mark.slow
def test_link_dropped_while_live_over_hislip_ends_safe(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    board = write_board(tmp_path, faults=[{"kind": "disconnect", "role": "bias", "after_s": 2.0}])
    with sim_bench(tmp_path, board, link="hislip") as (sim, bench):
        done = run_cli(
            run_args(write_procedure(tmp_path, soak_s=10.0), bench, db, "--yes"), tmp_path
        )
        state = supply_state(sim)
        with second_session(sim) as bias:
            assert bias.output_on() is False and abs(bias.voltage()) < TOL
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert "bias at TCPIP0::127.0.0.1::hislip0," in line, line
    assert "link to the supply dropped" in line or "connection closed" in line, line
    assert "UNSAFE" not in line and "internal error" not in line
    assert state["output"] is False and abs(state["volts"]) < TOL
    run, events = the_run(db)
    assert run.status == "aborted"
    assert [e.kind for e in events][-1] == "safe_state"


@pytest.mark.slow
def test_the_gain_qualification_gives_the_same_figures_over_instr_links(tmp_path):
    # the same board and seed over a raw socket and over HiSLIP: the same gains (the link carries
    # the same commands and bytes), within the gain tests' 2 % of the board file's truth
    from sequencer import compose
    from sequencer.procedure import build_plan, load_procedure
    from sequencer.store import Store
    from tests.integration.qualification_sim import PROCEDURES, channel, small_board
    from tests.integration.qualification_sim import write_board as write_qual_board

    path = write_qual_board(tmp_path, "NR-PA8-T951", [channel(gain_x1=1.03), channel(gain_x1=0.98)])
    gains = {}
    for link in ("socket", "hislip", "vxi11"):
        plan = build_plan(load_procedure(PROCEDURES / "gain-linearity.yaml"),
                          small_board("NR-PA8-T951", 2))  # fmt: skip
        request = compose.RunRequest(operator="test", unattended=True, progress=False,
                                     handle_signals=False)  # fmt: skip
        with start_sim_bench(path) as sim, Store.open(f"sqlite:///{tmp_path / link}.db") as store:
            spec = bench_from_mapping(sim.bench_mapping(link=link))
            result = compose.execute(plan, spec, store, request)
            gains[link] = {
                (m.channel, m.output): m.value
                for m in store.measurements(run_id=result.run_id)
                if m.quantity == "gain"
            }
    for link in ("hislip", "vxi11"):
        assert gains[link][(1, "x1")] == pytest.approx(1.03, rel=0.02)
        assert gains[link][(2, "x1")] == pytest.approx(0.98, rel=0.02)
        assert gains[link] == pytest.approx(gains["socket"], rel=1e-9)
