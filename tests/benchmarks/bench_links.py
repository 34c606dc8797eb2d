"""Command structures and links: what a foreign dialect or an INSTR link costs against the generic
structure over a raw socket, on the same simulated board, measured in the same run.

Rows (ours / baseline, medians, ours and baseline alternating so a busy machine slows both alike):

* ``capture_wavescope``: one 20 000-point capture through the waveform-subsystem dialect (source
  select, 10-field preamble, two chunks of 10 000) / the generic dialect; goal <= 3 (the chunks and
  the selection are extra round trips by design);
* ``bias_read_sourcemeter``: one voltage reading through the source-meter dialect (a READ? line
  parsed by field) / the generic one; goal <= 2;
* ``query_latency_hislip``: one query over HiSLIP / over a raw socket (the generic dialect, the
  same simulated instrument); goal <= 4 (pyvisa-py's HiSLIP client has no fast path);
* ``capture_hislip``: the generic 20 000-point capture over HiSLIP / over a raw socket; goal <= 4;
* ``query_latency_vxi11`` and ``capture_vxi11``: the same two over VXI-11 (ONC RPC: each write and
  each read is one RPC call and reply); goals <= 4.

The goals are this project's own (no outside source): a foreign structure or a link must not make
a qualification more than a few times slower than the generic path.
"""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable
from pathlib import Path

import yaml

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from drivers.sim.board_loader import board_from_mapping

EXAMPLE = Path(__file__).resolve().parents[2] / "drivers" / "sim" / "boards" / "example-pa8.yaml"
POINTS = 20_000
REPEATS = 15


def _board(command_sets: dict[str, str]):  # type: ignore[no-untyped-def]
    data = yaml.safe_load(EXAMPLE.read_text())
    if command_sets:
        data["command_sets"] = command_sets
    return board_from_mapping(data)


def _median_pair(ours: Callable[[], object], base: Callable[[], object]) -> tuple[float, float]:
    a, b = [], []
    for _ in range(REPEATS):
        t = time.perf_counter()
        base()
        b.append(time.perf_counter() - t)
        t = time.perf_counter()
        ours()
        a.append(time.perf_counter() - t)
    return statistics.median(a), statistics.median(b)


def _row(name: str, ours: float, base: float, unit_scale: float, unit: str, goal: float) -> dict:
    ratio = ours / base
    return {
        "name": name,
        "ours": round(ours * unit_scale, 2),
        "baseline": round(base * unit_scale, 2),
        "unit": unit,
        "ratio": round(ratio, 3),
        "goal": f"<= {goal:g}",
        "verdict": "met" if ratio <= goal else "short",
    }


def run() -> list[dict]:
    rows = []
    with (
        start_sim_bench(_board({})) as generic,
        start_sim_bench(_board({"scope": "wavescope", "bias": "sourcemeter"})) as foreign,
    ):
        roles = ["scope", "switch", "pulser", "bias"]
        g_sock = open_bench(bench_from_mapping(generic.bench_mapping()), roles=roles)
        g_hs = open_bench(bench_from_mapping(generic.bench_mapping(link="hislip")), roles=roles)
        g_vx = open_bench(bench_from_mapping(generic.bench_mapping(link="vxi11")), roles=roles)
        f_sock = open_bench(bench_from_mapping(foreign.bench_mapping()), roles=roles)
        try:
            for bench in (g_sock, g_hs, g_vx, f_sock):
                bench.scope.set_input(1, range_mV=1000.0)
                bench.scope.set_timebase(sample_rate_hz=1e9, points=POINTS, pretrigger_ns=100.0)
            ours, base = _median_pair(
                lambda: f_sock.scope.capture([1]), lambda: g_sock.scope.capture([1])
            )
            rows.append(_row("capture_wavescope", ours, base, 1e3, "ms", 3))
            ours, base = _median_pair(f_sock.bias.voltage, g_sock.bias.voltage)
            rows.append(_row("bias_read_sourcemeter", ours, base, 1e6, "us", 2))
            ours, base = _median_pair(g_hs.bias.voltage, g_sock.bias.voltage)
            rows.append(_row("query_latency_hislip", ours, base, 1e6, "us", 4))
            ours, base = _median_pair(
                lambda: g_hs.scope.capture([1]), lambda: g_sock.scope.capture([1])
            )
            rows.append(_row("capture_hislip", ours, base, 1e3, "ms", 4))
            ours, base = _median_pair(g_vx.bias.voltage, g_sock.bias.voltage)
            rows.append(_row("query_latency_vxi11", ours, base, 1e6, "us", 4))
            ours, base = _median_pair(
                lambda: g_vx.scope.capture([1]), lambda: g_sock.scope.capture([1])
            )
            rows.append(_row("capture_vxi11", ours, base, 1e3, "ms", 4))
        finally:
            for bench in (g_sock, g_hs, g_vx, f_sock):
                bench.close()
    return rows
