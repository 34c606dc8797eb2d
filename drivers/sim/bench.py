"""Start the seven simulated instruments of a bench, describe them as a bench file, serve until stopped.

``start_sim_bench`` wires one board to a pulser, scope, threshold DAC, counter, bias supply, channel
switch and coincidence unit, each a real TCP server on ``host`` (ports ``port_base + 0..6`` in
:data:`ROLES` order, or free ephemeral ports with ``port_base=0``).  ``serve`` is what ``benchwright sim`` runs.
"""

from __future__ import annotations

import datetime as dt
import signal
import sys
import threading
import time
from collections.abc import Callable
from pathlib import Path
from types import FrameType
from typing import Any

import yaml

from drivers.errors import TransportError
from drivers.sim.bias import BiasSupply
from drivers.sim.board import ROLES, BoardSpec
from drivers.sim.clock import SimClock
from drivers.sim.coincidence import CoincidenceUnit
from drivers.sim.counter import Counter
from drivers.sim.digitizer import Digitizer
from drivers.sim.faults import FaultRunner
from drivers.sim.files import load_sim_file
from drivers.sim.hislip import HislipServer
from drivers.sim.instrument import MAKER, SimInstrument
from drivers.sim.pulser import Pulser
from drivers.sim.sensor import SensorSpec
from drivers.sim.server import InstrumentServer
from drivers.sim.sourcemeter import SourceMeterBias
from drivers.sim.switch import Switch
from drivers.sim.threshold import ThresholdDac
from drivers.sim.vxi11 import Vxi11Server
from drivers.sim.wavescope import WaveformScope
from drivers.timing import DEFAULT_TIMING

DEFAULT_TIMEOUT_MS = 5000
#: The links every simulated instrument is served over at once (see :meth:`SimBench.address`).
LINKS = ("socket", "hislip", "vxi11")
#: Command structures per role (board file ``command_sets``); each name is also the shipped dialect
#: (``drivers/dialects/<name>.yaml``) that speaks it.
SCOPES: dict[str, type[Digitizer]] = {"generic": Digitizer, "wavescope": WaveformScope}
SUPPLIES: dict[str, type[BiasSupply]] = {"generic": BiasSupply, "sourcemeter": SourceMeterBias}


def _instruments(board: BoardSpec, clock: Callable[[], float]) -> dict[str, SimInstrument]:
    """The seven instruments, cross-wired to the board and to each other."""

    def common(role: str) -> dict[str, Any]:
        ident = ROLES.index(role) + 1
        return {"instrument_id": ident, "serial": f"SIM{ident:02d}-{board.serial}", "clock": clock}

    n = len(board.channels)
    pulser = Pulser(**common("pulser"))
    switch = Switch(channels=n, **common("switch"))
    threshold = ThresholdDac(channels=n, **common("threshold"))
    coincidence = CoincidenceUnit(
        spec=board.coincidence,
        pulser=pulser,
        seed=board.seed,
        time_scale=board.time_scale,
        **common("coincidence"),
    )
    return {
        "pulser": pulser,
        "scope": SCOPES[board.command_sets.get("scope", "generic")](
            board=board,
            pulser=pulser,
            switch=switch,
            threshold=threshold,
            coincidence=coincidence,
            **common("scope"),
        ),
        "threshold": threshold,
        "counter": Counter(
            board=board, pulser=pulser, switch=switch, threshold=threshold, **common("counter")
        ),
        "bias": SUPPLIES[board.command_sets.get("bias", "generic")](board=board, **common("bias")),
        "switch": switch,
        "coincidence": coincidence,
    }


class SimBench:
    """A running simulated bench: seven instrument servers sharing one board and one lock."""

    def __init__(
        self,
        board: BoardSpec,
        *,
        host: str = "127.0.0.1",
        port_base: int = 0,
        bench_name: str = "sim-bench",
        max_volts: float = 60.0,
        max_ramp_V_per_s: float = 10.0,
        max_current_uA: float = 100.0,
        clock: Callable[[], float] = time.monotonic,
        realtime: bool = False,
    ) -> None:
        self.board = board
        timing = board.timing if isinstance(board, BoardSpec) else DEFAULT_TIMING
        #: The bench's time as a real one would take it (drivers/sim/clock.py); ``realtime``: the
        #: instruments wait for it too (``benchwright run --realtime``).
        self.pace = SimClock(timing, realtime=realtime)
        self.host = host
        self.bench_name = bench_name
        self.limits = {
            "max_volts": max_volts,
            "max_ramp_V_per_s": max_ramp_V_per_s,
            "max_current_uA": max_current_uA,
        }
        self.instruments = self.make_instruments(board, clock)
        for instrument in self.instruments.values():
            instrument.pace = self.pace
        lock = threading.Lock()
        self._servers: dict[str, InstrumentServer] = {}
        self._hislip: dict[str, HislipServer] = {}
        self._vxi11: dict[str, Vxi11Server] = {}
        try:
            for index, role in enumerate(self.instruments):
                port = port_base + index if port_base else 0
                try:
                    server = InstrumentServer(
                        self.instruments[role],
                        lock=lock,
                        host=host,
                        port=port,
                        faults=FaultRunner(board.faults_for(role), clock),
                    )
                except OSError as exc:
                    raise TransportError(
                        f"cannot listen for the simulated {role} on {host}:{port}: "
                        f"{exc.strerror or exc}"
                    ) from None
                self._servers[role] = server
                server.start()
                hislip = HislipServer(server, host=host)  # a free port: none privileged
                self._hislip[role] = hislip
                hislip.start()
                vxi11 = Vxi11Server(server, host=host)  # explicit port: no portmapper, no root
                self._vxi11[role] = vxi11
                vxi11.start()
        except BaseException:
            self.stop()
            raise

    def make_instruments(
        self, board: BoardSpec, clock: Callable[[], float]
    ) -> dict[str, SimInstrument]:
        """role -> instrument, in port order (a sensor bench plays other roles)."""
        return _instruments(board, clock)

    @property
    def ports(self) -> dict[str, int]:
        """role -> TCP port."""
        return {role: server.port for role, server in self._servers.items()}

    def address(self, role: str, link: str = "socket") -> str:
        """VISA resource string of ``role`` over ``link``: ``socket`` (raw SCPI over TCP) or
        ``hislip`` (IVI-6.1) or ``vxi11`` (VXI-11 core channel); the INSTR ports are explicit in
        the address, so no portmapper is asked."""
        if link == "hislip":
            return f"TCPIP0::{self.host}::hislip0,{self._hislip[role].port}::INSTR"
        if link == "vxi11":
            return f"TCPIP0::{self.host},{self._vxi11[role].port}::inst0::INSTR"
        return f"TCPIP0::{self.host}::{self.ports[role]}::SOCKET"

    def restore_link(self, role: str) -> None:
        """End a ``link_down`` fault of ``role``'s instrument (and a silent one): the link is back."""
        server = self._servers[role]
        with server.lock:
            server.faults.lift()

    def stop(self) -> None:
        """Stop every server and close every client connection (idempotent)."""
        servers, self._servers = self._servers, {}
        hislip, self._hislip = self._hislip, {}
        vxi11, self._vxi11 = self._vxi11, {}
        stoppers = [threading.Thread(target=server.stop) for server in servers.values()]
        stoppers += [threading.Thread(target=server.stop) for server in hislip.values()]
        stoppers += [threading.Thread(target=server.stop) for server in vxi11.values()]
        for stopper in stoppers:  # in parallel: each waits up to one poll interval
            stopper.start()
        for stopper in stoppers:
            stopper.join()

    def __enter__(self) -> SimBench:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def dialect_of(self, role: str) -> str:
        """The shipped dialect that speaks ``role``'s command structure (board ``command_sets``)."""
        sets = self.board.command_sets if isinstance(self.board, BoardSpec) else {}
        return sets.get(role, "generic")

    def bench_mapping(self, link: str = "socket") -> dict[str, Any]:
        """The bench-file data (DESIGN.md "Bench file") describing this simulated bench."""
        due = dt.date.today() + dt.timedelta(days=365)
        calibrated = dt.date.today() - dt.timedelta(days=30)  # invented: a simulator is not calibrated
        instruments: dict[str, Any] = {}
        for role, inst in self.instruments.items():
            entry: dict[str, Any] = {
                "address": self.address(role, link),
                "dialect": self.dialect_of(role),
                "read_termination": "\n",
                "write_termination": "\n",
                "timeout_ms": DEFAULT_TIMEOUT_MS,
                "expect_id": f"{MAKER},{inst.model}",
                "calibrated": calibrated,
                "calibration_due": due,
            }
            if role == "bias":
                entry.update(self.limits)
            instruments[role] = entry
        return {"bench": self.bench_name, "instruments": instruments}

    def write_bench(self, path: str | Path, link: str = "socket") -> Path:
        """Write :meth:`bench_mapping` (over ``link``) as a YAML bench file; returns the path."""
        out = Path(path)
        header = f"# simulated bench for board {self.board.serial} ({self.board.source})\n"
        text = yaml.dump(self.bench_mapping(link), Dumper=_BenchDumper, sort_keys=False)
        out.write_text(header + text, encoding="utf-8")
        return out


class _BenchDumper(yaml.SafeDumper):
    """Writes strings with control characters (terminations) as one-line escapes: "\\n";
    never anchors and aliases, so the file reads plainly."""

    def ignore_aliases(self, data: object) -> bool:
        return True


def _represent_str(dumper: yaml.SafeDumper, value: str) -> yaml.ScalarNode:
    style = '"' if any(c in value for c in "\r\n\t") else None
    return dumper.represent_scalar("tag:yaml.org,2002:str", value, style=style)


_BenchDumper.add_representer(str, _represent_str)


def start_sim_bench(
    board: BoardSpec | SensorSpec | str | Path,
    *,
    host: str = "127.0.0.1",
    port_base: int = 0,
    bench_name: str = "sim-bench",
    max_volts: float = 60.0,
    max_ramp_V_per_s: float = 10.0,
    max_current_uA: float = 100.0,
    clock: Callable[[], float] = time.monotonic,
    realtime: bool = False,
) -> SimBench:
    """Start the simulated instruments of ``board`` (a spec, a board file or a sensor file) in
    background threads.  ``realtime``: acquisitions, gates, relays and round trips take the time
    the board file's ``timing:`` (drivers/timing.py) says a real bench takes; else they are only
    accounted on the bench's clock (``SimBench.pace``)."""
    spec = board if isinstance(board, BoardSpec | SensorSpec) else load_sim_file(board)
    from drivers.sim.sensor_bench import SensorBench  # it builds on SimBench

    kind = SensorBench if isinstance(spec, SensorSpec) else SimBench
    return kind(
        spec,
        host=host,
        port_base=port_base,
        bench_name=bench_name,
        max_volts=max_volts,
        max_ramp_V_per_s=max_ramp_V_per_s,
        max_current_uA=max_current_uA,
        clock=clock,
        realtime=realtime,
    )


def serve(
    board_path: str | Path,
    *,
    host: str = "127.0.0.1",
    port_base: int = 0,
    bench_out: Path | None = None,
    on_ready: Callable[[SimBench], None] | None = None,
    stop_event: threading.Event | None = None,
    link: str = "socket",
    realtime: bool = False,
) -> None:
    """Serve the simulated bench of ``board_path`` until SIGINT or SIGTERM, then stop cleanly.

    Prints the VISA address of each instrument and writes the bench file to ``bench_out`` if given.
    Signal handlers are installed only in the main thread; ``stop_event`` (set by the caller) also
    stops the bench, for embedding.
    """
    stop = stop_event if stop_event is not None else threading.Event()

    def on_signal(signum: int, frame: FrameType | None) -> None:
        stop.set()

    in_main = threading.current_thread() is threading.main_thread()
    previous = (
        {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)} if in_main else {}
    )
    try:
        with start_sim_bench(board_path, host=host, port_base=port_base, realtime=realtime) as bench:
            if bench_out is not None:
                bench.write_bench(bench_out, link)
            print(f"simulated bench for board {bench.board.serial}:")
            for role in bench.ports:
                addresses = (bench.address(role, link) for link in LINKS)
                print(f"  {role:<9} " + "  ".join(addresses))
            if bench_out is not None:
                print(f"bench file: {bench_out}")
            print("press Ctrl-C to stop", flush=True)
            if on_ready is not None:
                on_ready(bench)
            while not stop.wait(0.2):
                pass
        print("simulated bench stopped", file=sys.stderr, flush=True)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
