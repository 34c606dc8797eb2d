"""The bench timing model in the simulator (drivers/timing.py, drivers/sim/clock.py): what each
instrument accounts, the board file's ``timing:`` section, real-time waits; over real sockets.

Outside checks: averaging N triggered records takes N trigger periods when the period exceeds the
record (standard: one trigger per pulse), a counter gate lasts its gate time, a supply slews
|dV| / rate (physics).  Lower bounds on elapsed time only (a loaded machine only adds time).
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from drivers.bench import bench_from_mapping, open_bench
from drivers.errors import ConfigError
from drivers.sim import load_board, start_sim_bench
from drivers.sim.clock import SimClock
from drivers.timing import BenchTiming, InstrumentTiming, acquisition_s, ramp_s

ROOT = Path(__file__).resolve().parents[3]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"


def test_the_clock_adds_up_by_kind_and_waits_only_in_real_time():
    ticks = iter([10.0, 10.3])
    clock = SimClock(realtime=True, now=lambda: next(ticks))
    since = clock.mark()  # 10.0
    # 0.5 s of gate of which 0.3 s already went by computing: 0.2 s left to wait
    assert clock.spend("gate", 0.5, since=since) == pytest.approx(0.2)
    accounted = SimClock()
    assert (
        accounted.spend("acquisition", 0.25) == 0.0 and accounted.spend("round_trip", 1e-3) == 0.0
    )
    assert accounted.seconds("acquisition") == 0.25 and accounted.counts()["round_trip"] == 1
    assert accounted.demanded_s() == 0.25 and accounted.overhead_s() == pytest.approx(1e-3)
    with pytest.raises(ValueError, match="unknown kind"):
        accounted.spend("coffee", 1.0)


def test_the_model_formulas():
    # 256 averages at a 10 kHz trigger of a 400 ns record: 256 trigger periods = 25.6 ms
    assert acquisition_s(averages=256, points=400, sample_rate_hz=1e9, trigger_rate_hz=1e4) == (
        pytest.approx(0.0256)
    )
    # a record longer than the trigger period: the record length counts (10 us x 4)
    assert acquisition_s(averages=4, points=10_000, sample_rate_hz=1e9, trigger_rate_hz=1e6) == (
        pytest.approx(4e-5)
    )
    assert ramp_s(30.0, 0.0, 10.0) == pytest.approx(3.0)


def test_the_board_file_states_the_timing_per_role(tmp_path):
    text = BOARD.read_text() + "timing:\n  switch: {relay_settle_ms: 15, round_trip_ms: 0.5}\n"
    board = tmp_path / "b.yaml"
    board.write_text(text)
    timing = load_board(board).timing
    assert timing.of("switch") == InstrumentTiming(relay_settle_s=0.015, round_trip_s=0.0005)
    assert timing.of("scope") == InstrumentTiming()  # unstated: the defaults
    assert load_board(BOARD).timing == BenchTiming()
    bad = tmp_path / "bad.yaml"
    lines = BOARD.read_text().splitlines()
    bad.write_text("\n".join([*lines, "timing:", "  switch: {relay_settle: 15}"]) + "\n")
    with pytest.raises(ConfigError) as caught:
        load_board(bad)
    assert f"bad.yaml:{len(lines) + 2}:" in str(caught.value)
    assert "unknown key 'relay_settle' in timing.switch" in str(caught.value)


def _opened(sim, roles):
    return open_bench(bench_from_mapping(sim.bench_mapping()), roles=roles)


def test_each_instrument_accounts_what_a_real_one_takes():
    with (
        start_sim_bench(BOARD) as sim,
        _opened(sim, ["pulser", "scope", "counter", "switch"]) as bench,
    ):
        bench.pulser.set_rate(hz=1e4)
        bench.counter.set_gate(0.05)
        for _ in range(3):
            bench.counter.count(1)
        bench.scope.set_timebase(sample_rate_hz=1e9, points=400)
        bench.scope.set_averages(64)
        bench.scope.set_trigger("EXTernal")
        bench.scope.capture([1])
        bench.switch.route(1, "x1", 1)
        bench.switch.close_channels([1101])  # the same route again: no relay moves
        bench.switch.route(2, "x1", 1)
        pace = sim.pace
        assert pace.seconds("gate") == pytest.approx(3 * 0.05)
        assert pace.seconds("acquisition") == pytest.approx(64 / 1e4)  # 64 trigger periods
        assert pace.counts()["settle"] == 2 and pace.seconds("settle") == pytest.approx(2 * 2e-3)
        # every program message any session sent cost one round trip on the bench's clock
        sent = sum(bench.role(r).session.messages for r in ("pulser", "scope", "counter", "switch"))
        assert pace.counts()["round_trip"] == sent
        # the block: 400 int16 samples (800 bytes) and its header "#3800" over 10 MB/s
        assert pace.seconds("transfer") == pytest.approx((800 + 5) / 10e6)


def test_a_supply_ramp_is_accounted_from_its_slew():
    with start_sim_bench(BOARD) as sim, _opened(sim, ["bias"]) as bench:
        bench.bias.start_ramp(5.0, 5.0)  # output off: nothing moves
        assert sim.pace.seconds("ramp") == 0.0
        bench.bias.set_output(True)  # 0 -> 5 V at 5 V/s
        bench.bias.set_output(False)
        assert sim.pace.seconds("ramp") == pytest.approx(1.0)


def test_in_real_time_a_gate_takes_its_time():
    with start_sim_bench(BOARD, realtime=True) as sim, _opened(sim, ["counter"]) as bench:
        bench.counter.set_gate(0.2)
        start = time.monotonic()
        bench.counter.count(1)
        assert time.monotonic() - start >= 0.2  # a lower bound: load only adds time
        assert sim.pace.seconds("gate") == pytest.approx(0.2)
