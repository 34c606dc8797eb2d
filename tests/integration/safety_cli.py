"""Helpers of the operator-safety tests: the real ``benchwright run`` in a child process against a
simulated bench that lives in the test process (so its supply can be read back after the CLI exits).

The supply is watched through a second client session (the drivers' ``BiasSupply`` over its own
socket) and, where a link fault makes that impossible, through the simulator's own objects.
"""

from __future__ import annotations

import contextlib
import os
import pty
import select
import signal
import subprocess
import sys
import time
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml

from drivers.bench import bench_from_mapping, load_bench, open_bench
from drivers.sim import SimBench, board_from_mapping, start_sim_bench
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
SERIAL = "NR-PA8-0001"
VOLT = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"
#: The caution's wording (issue "Operator safety"; sequencer.engine.records.SAFETY_TEXT).
ADVICE = "keep the enclosure closed; follow your lab's safety rules and local codes"

# Small on purpose: 5 V at 5 V/s is a one-second ramp each way.  SiPM bias ramps of 1-10 V/s are
# common practice (REFERENCES.md, no source); 5 V is far below the 70 V dc hazardous-live limit of
# IEC 61010-1 (from memory), so nothing here needs more than the test's own limits.
PROCEDURE = """\
name: safety-check
version: "1"
description: ramp the bias to a test voltage, hold it, read it, ramp down
board_type: PA8
roles: [bias]
hazards: [bias]
steps:
{limit}  - bias.ramp: {{volts: {volts} V, rate: {rate} V/s}}
    name: up
  - wait: {soak} s
    name: soak
  - bias.read: {{into: hv}}
  - bias.ramp: {{volts: 0 V, rate: {rate} V/s}}
    name: down
  - bias.output: false
cleanup:
  - bias.output: false
"""


def write_procedure(
    folder: Path,
    *,
    volts: float = 5.0,
    rate: float = 5.0,
    soak_s: float = 0.3,
    limit_uA: float | None = 10.0,
    name: str = "hv.yaml",
) -> Path:
    """A small bias procedure in ``folder`` (``limit_uA`` None: no ``bias.limit`` step)."""
    limit = "" if limit_uA is None else f"  - bias.limit: {limit_uA:g} uA\n"
    text = PROCEDURE.format(limit=limit, volts=f"{volts:g}", rate=f"{rate:g}", soak=f"{soak_s:g}")
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def write_board(folder: Path, *, faults: Sequence[dict] = (), **keys: Any) -> Path:
    """The example board file with ``faults`` and any other keys replaced, in ``folder``."""
    data = yaml.safe_load(BOARD.read_text(encoding="utf-8"))
    data["faults"] = list(faults)
    data.update(keys)
    path = folder / "board.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


@contextlib.contextmanager
def sim_bench(
    folder: Path,
    board: Path,
    *,
    max_volts: float = 60.0,
    max_ramp_V_per_s: float = 5.0,
    max_current_uA: float = 100.0,
    bias_timeout_ms: int | None = None,
    link: str = "socket",
) -> Iterator[tuple[SimBench, Path]]:
    """A simulated bench started here (it outlives the CLI) and its bench file (addresses over
    ``link``: ``socket`` or ``hislip``), stopped at the end."""
    spec = board_from_mapping(yaml.safe_load(board.read_text(encoding="utf-8")), source=str(board))
    with start_sim_bench(
        spec,
        max_volts=max_volts,
        max_ramp_V_per_s=max_ramp_V_per_s,
        max_current_uA=max_current_uA,
    ) as sim:
        path = sim.write_bench(folder / "bench.yaml", link)
        if bias_timeout_ms is not None:  # a silent supply is reported after one short timeout
            data = yaml.safe_load(path.read_text(encoding="utf-8"))
            data["instruments"]["bias"]["timeout_ms"] = bias_timeout_ms
            path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
        load_bench(path)  # the file the CLI reads is a valid bench file
        yield sim, path


@contextlib.contextmanager
def second_session(sim: SimBench) -> Iterator[Any]:
    """The drivers' ``BiasSupply`` over its own connection to the simulated supply."""
    with open_bench(bench_from_mapping(sim.bench_mapping()), roles=["bias"]) as bench:
        yield bench.bias


def cli_command(*args: str) -> list[str]:
    return [sys.executable, "-m", "sequencer", *args]


def run_args(procedure: Path, bench: Path, db: str, *extra: str) -> list[str]:
    return cli_command(
        "run", str(procedure), "--bench", str(bench), "--board", SERIAL, "--db", db, *extra
    )


def child_env() -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k != "BENCHWRIGHT_DB"}
    env["PYTHONPATH"] = str(ROOT)
    env["COLUMNS"] = "80"  # help and caution text wrap the same on every machine
    return env


@dataclass
class Finished:
    code: int
    stdout: str
    stderr: str
    seconds: float


def run_cli(args: list[str], folder: Path, *, timeout_s: float = 60.0) -> Finished:
    """Run the CLI without a terminal (stdin from /dev/null) and wait for it."""
    start = time.monotonic()
    proc = subprocess.run(
        args,
        cwd=folder,
        env=child_env(),
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=timeout_s,
    )
    return Finished(proc.returncode, proc.stdout, proc.stderr, time.monotonic() - start)


class Child:
    """The CLI running in the background (output to files, so a full pipe never blocks it)."""

    def __init__(self, args: list[str], folder: Path) -> None:
        self.out = folder / "cli.out"
        self.err = folder / "cli.err"
        self.start = time.monotonic()
        with self.out.open("w") as out, self.err.open("w") as err:
            self.proc = subprocess.Popen(
                args, cwd=folder, env=child_env(), stdin=subprocess.DEVNULL, stdout=out, stderr=err
            )

    def wait(self, timeout_s: float = 60.0) -> Finished:
        try:
            code = self.proc.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
            raise
        return Finished(
            code, self.out.read_text(), self.err.read_text(), time.monotonic() - self.start
        )

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()


def wait_until_live(bias: Any, volts: float, child: Child, *, timeout_s: float = 20.0) -> float:
    """Poll the supply through ``bias`` (a second session) until it reads ``volts`` with the output
    on; the reading."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if child.proc.poll() is not None:
            raise AssertionError(f"the CLI ended (exit {child.proc.returncode}) before going live")
        v = bias.voltage()
        if bias.output_on() and abs(v - volts) < 0.1:
            return v
        time.sleep(0.02)
    raise AssertionError(f"the supply did not reach {volts} V within {timeout_s} s")


def watch_ramp(bias: Any, child: Child, *, timeout_s: float = 20.0) -> list[tuple[bool, float]]:
    """(output on, measured V) read through ``bias`` every 20 ms until the CLI ends."""
    seen: list[tuple[bool, float]] = []
    deadline = time.monotonic() + timeout_s
    while child.proc.poll() is None and time.monotonic() < deadline:
        seen.append((bias.output_on(), bias.voltage()))
        time.sleep(0.02)
    return seen


def supply_state(sim: SimBench) -> dict[str, Any]:
    """What the simulated supply holds now, read from the simulator's objects (no client needed)."""
    bias = sim.instruments["bias"]
    return {
        "output": bias.settings.output_on,
        "volts": bias.voltage_at(bias.clock()),
        "setpoint": bias.settings.setpoint_V,
        "limit_A": bias.settings.limit_A,
        "ever_on": bias.first_on is not None,
        "received": program_units(bias.received),
    }


def program_units(messages: Sequence[str]) -> list[str]:
    """The units of the program messages the supply received, in order: one message may join
    several (``SOURce:VOLTage:SLEW 5;:SYSTem:ERRor:NEXT?``, IEEE 488.2 7.3: units separated by
    ';', a leading ':' from the root), and the order of the commands is what the tests check."""
    return [u.strip().removeprefix(":") for m in messages for u in m.split(";") if u.strip()]


def voltage_commands(messages: Sequence[str]) -> list[float]:
    """Values of every set-voltage command among ``messages``."""
    return [float(m.split()[-1]) for m in messages if m.startswith(VOLT + " ")]


def the_run(url: str) -> tuple[Any, list[Any]]:
    """The only run in the database at ``url`` and its stored safety events."""
    with Store.open(url) as store:
        runs = store.list_runs()
        assert len(runs) == 1, runs
        return runs[0], store.safety_events(runs[0].id)


def kinds(events: Sequence[Any]) -> list[str]:
    return [e.kind for e in events]


def last_line(text: str) -> str:
    lines = [line for line in text.splitlines() if line.strip()]
    return lines[-1] if lines else ""


def read_until(fd: int, needle: bytes, timeout_s: float) -> bytes:
    """Read a pseudo-terminal until ``needle`` shows up (bounded)."""
    seen = b""
    deadline = time.monotonic() + timeout_s
    while needle not in seen and time.monotonic() < deadline:
        ready, _, _ = select.select([fd], [], [], 0.1)
        if ready:
            try:
                seen += os.read(fd, 4096)
            except OSError:  # the child closed its side
                break
    return seen


def answer_on_terminal(
    args: list[str], cwd: Path, prompt: bytes, answer: str, *, linger_s: float = 2.0
) -> tuple[str, int]:
    """Run ``args`` on a pseudo-terminal, wait for ``prompt``, then type ``answer`` (or send the
    signal it names, e.g. ``SIGINT``); (what the terminal showed, exit code).  A child that does
    not end within 30 s after the answer is killed and the test fails on its exit code."""
    primary, secondary = pty.openpty()
    child = subprocess.Popen(
        args,
        cwd=cwd,
        env={**child_env(), "TERM": "dumb"},
        stdin=secondary,
        stdout=secondary,
        stderr=secondary,
    )
    os.close(secondary)
    try:
        shown = read_until(primary, prompt, 60.0)
        if answer.startswith("SIG"):
            child.send_signal(getattr(signal, answer))
        else:
            os.write(primary, answer.encode() + b"\n")
        shown += read_until(primary, b"\x00", linger_s)
        code = child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
        os.close(primary)
    return shown.decode("utf-8", "replace").replace("\r", ""), code
