"""What the reliability tests share: board and bench files, the real CLI in a subprocess, read-backs.

Every run goes through ``python -m sequencer`` in a child process (real interpreter, real exit code,
real stderr), against the simulator either inside that process (``--sim BOARD``) or inside the test
process (``--bench FILE`` of a :class:`~drivers.sim.SimBench` started here), so that the test can
watch the bias supply after the CLI has exited.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pytest
import yaml

from drivers.bench import bench_from_mapping, open_bench
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE_BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = Path(__file__).with_name("procedures") / "scan-under-bias.yaml"
#: The measurements of one complete run of PROCEDURE: (quantity, channel, output).
EXPECTED_KEYS = frozenset(
    {(q, ch, "x1") for q in ("gain", "offset_mV", "inl_pct") for ch in (1, 2)}
    | {("leakage_nA", None, None)}
)
# Board file truth (drivers/sim/boards/example-pa8.yaml): gain_x1 of channels 1 and 2; with
# A <= 80 mV and S = 1500 mV the tanh compression of DESIGN.md's physics is below 0.1 % (tanh x ~
# x - x^3/3), so the best-fit slope is the gain within the noise: 0.3 mV RMS / sqrt(16 averages) on
# four heights from 10 to 80 mV gives a slope error ~0.2 % (least-squares slope error sigma /
# sqrt(sum (A - mean A)^2), any statistics text), so 2 % is a 10-sigma bound.  Leakage I = V / R = 3 V / 5000 MOhm = 0.6 nA
# (Ohm's law) plus the simulated meter's 0.02 nA offset (drivers/sim/board.py default).
TRUE_GAIN = {1: 1.01, 2: 0.99}
TRUE_LEAKAGE_NA = 0.62
EXIT_OK, EXIT_FAIL, EXIT_INPUT, EXIT_ABORT = 0, 1, 2, 3  # DESIGN.md "Exit codes"
#: A CLI run of PROCEDURE takes 2-4 s; a hang is anything far beyond that.
CLI_TIMEOUT_S = 90.0
LOCATED = re.compile(r"^(?P<file>.+?):(?P<line>\d+):(?P<col>\d+): \S.*$")


def write_board(
    folder: Path,
    *,
    faults: Sequence[dict] = (),
    serial: str | None = None,
    name: str = "board.yaml",
) -> Path:
    """The example board file with ``faults`` (and ``serial``) replaced, in ``folder``."""
    data = yaml.safe_load(EXAMPLE_BOARD.read_text())
    data["faults"] = [dict(f) for f in faults]
    if serial:
        data["serial"] = serial
    path = folder / name
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def write_bench(sim: Any, folder: Path, *, timeout_ms: int = 5000) -> Path:
    """The bench file of a running simulated bench, every instrument with ``timeout_ms``."""
    data = sim.bench_mapping()
    for spec in data["instruments"].values():
        spec["timeout_ms"] = timeout_ms
    path = folder / "bench.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def bench_text(scope_dialect: str = "generic") -> str:
    """A bench file for the roles of PROCEDURE (nothing need listen: for input checks)."""
    roles = {"pulser": 5025, "scope": 5026, "switch": 5030}
    lines = ["bench: reliability-bench", "instruments:"]
    for role, port in roles.items():
        dialect = scope_dialect if role == "scope" else "generic"
        lines.append(
            f'  {role}: {{address: "TCPIP0::127.0.0.1::{port}::SOCKET", dialect: {dialect}}}'
        )
    lines.append(
        '  bias: {address: "TCPIP0::127.0.0.1::5029::SOCKET", max_volts: 60, max_ramp_V_per_s: 10}'
    )
    return "\n".join(lines) + "\n"


def cli_env() -> dict[str, str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop("BENCHWRIGHT_DB", None)
    return env


def cli_command(*args: str) -> list[str]:
    return [sys.executable, "-m", "sequencer", *args]


def run_cli(*args: str, cwd: Path, timeout_s: float = CLI_TIMEOUT_S) -> subprocess.CompletedProcess:
    """``benchwright ARGS`` in a child process; ``subprocess.TimeoutExpired`` is a hang."""
    return subprocess.run(
        cli_command(*args),
        cwd=cwd,
        env=cli_env(),
        capture_output=True,
        text=True,
        timeout=timeout_s,
        stdin=subprocess.DEVNULL,
    )


def invoke(*args: str) -> tuple[int, str, str]:
    """``benchwright ARGS`` in this process (click's runner): (exit code, stdout, stderr).

    Exceptions are not caught: a traceback the CLI would have shown fails the test with it.  Only
    the commands defined in ``sequencer/cli.py`` itself (run, resume, validate, ...) are needed.
    """
    from click.testing import CliRunner

    from sequencer.cli import cli

    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr


def run_args(url: str, *, sim: Path | None = None, bench: Path | None = None) -> list[str]:
    """``run PROCEDURE ... --db URL --yes`` on a simulated board file or a bench file."""
    where = ["--sim", str(sim)] if sim is not None else ["--bench", str(bench)]
    board = [] if sim is not None else ["--board", "NR-PA8-0001"]
    return [
        "run",
        str(PROCEDURE),
        *where,
        *board,
        "--db",
        url,
        "--yes",
        "--operator",
        "reliability",
    ]


def resume_args(url: str, run_id: int, *, sim: Path) -> list[str]:
    return ["resume", str(run_id), "--db", url, "--sim", str(sim), "--yes"]


def run_id_of(out: str) -> int | None:
    """The run id from ``run N completed: ...`` on stdout."""
    m = re.search(r"^run (\d+) completed", out, re.MULTILINE)
    return int(m.group(1)) if m else None


def last_run_id(url: str) -> int:
    with Store.open(url) as store:
        runs = store.list_runs()
    assert runs, "no run was recorded"
    return runs[-1].id


def stored_measurements(url: str, run_id: int) -> list[Any]:
    with Store.open(url) as store:
        return store.measurements(run_id=run_id)


def keys_of(measurements: Sequence[Any]) -> list[tuple]:
    return [(m.quantity, m.channel, m.output) for m in measurements]


def check_values(url: str, run_id: int) -> None:
    """Exactly the full set of measurements, once each, with the board file's values."""
    ms = stored_measurements(url, run_id)
    keys = keys_of(ms)
    assert sorted(keys, key=str) == sorted(EXPECTED_KEYS, key=str), keys  # none twice, none missing
    by_key = {(m.quantity, m.channel): m.value for m in ms}
    for channel, gain in TRUE_GAIN.items():
        assert by_key[("gain", channel)] == pytest.approx(gain, rel=0.02), channel
    assert by_key[("leakage_nA", None)] == pytest.approx(TRUE_LEAKAGE_NA, rel=0.1)


def no_traceback(*texts: str) -> bool:
    return all("Traceback (most recent call last)" not in t for t in texts)


def bias_state(sim: Any) -> tuple[bool, float]:
    """(output on, measured volts) of the simulated supply, read through a second session."""
    spec = bench_from_mapping(sim.bench_mapping())
    with open_bench(spec, roles=["bias"]) as watcher:
        return watcher.bias.output_on(), watcher.bias.voltage()
