"""Integration: the drivers against the simulated bench (drivers/sim) over real TCP on 127.0.0.1.

Physics checked (DESIGN.md "Simulated board file", the simulator's contract): the fast output of
channel c for an injected amplitude A is baseline + S·tanh(gain·A/S)·p(t), p of unit height; the
counter counts one per pulse above threshold, so counts = rate × gate (no noise firing at 20 mV,
about 70 σ above a 0.29 mV noise floor).
"""

import datetime as dt
import math
from pathlib import Path

import numpy as np
import pytest

from drivers.bench import bench_from_mapping, open_bench
from drivers.errors import SafetyLimitError
from drivers.instruments import describe_bench

sim = pytest.importorskip("drivers.sim", reason="the simulator (drivers/sim) is not available")

BOARD = Path(__file__).resolve().parents[2] / "drivers" / "sim" / "boards" / "example-pa8.yaml"


@pytest.fixture
def sim_bench():
    with sim.start_sim_bench(BOARD) as running:
        yield running


def test_every_role_opens_identifies_and_matches_expect_id(sim_bench):
    spec = bench_from_mapping(sim_bench.bench_mapping())
    with open_bench(spec) as bench:
        identities = bench.identities()
        assert sorted(identities) == sorted(spec.instruments)
        assert bench.check(dt.date.today()) == []
    reports = describe_bench(spec, dt.date.today())
    assert all(r.ok and not r.warnings for r in reports)


def test_pulse_height_and_counts_through_the_drivers(sim_bench):
    spec = bench_from_mapping(sim_bench.bench_mapping())
    channel = sim_bench.board.channels[2]  # channel 3
    with open_bench(spec) as bench:
        bench.pulser.set_amplitude(100.0)
        bench.pulser.set_rate(1000.0)
        bench.pulser.set_output(True)
        bench.switch.inject(3)
        bench.switch.route(3, "x1", 1)
        assert bench.switch.closed([103, 1103]) == [True, True]
        bench.scope.set_input(1, range_mV=1000.0)
        bench.scope.set_timebase(sample_rate_hz=1e9, points=1000, pretrigger_ns=100.0)
        bench.scope.set_trigger("EXTernal", 0.0)
        (trace,) = bench.scope.capture([1])
        assert (len(trace), trace.dt_s, trace.t0_s) == (1000, 1e-9, -1e-7)
        s = channel.saturation_mV
        expected = s * math.tanh(channel.gain_x1 * 100.0 / s)  # DESIGN.md simulator physics
        height = trace.mV.max() - np.median(trace.mV[:50])
        assert height == pytest.approx(expected, abs=2.0)  # noise 0.29 mV rms, 1000 mV range
        bench.threshold.set_level(3, 20.0)
        assert bench.threshold.level_mV(3) == pytest.approx(20.0)
        bench.counter.set_gate(0.01)
        assert bench.counter.count(3) == 10  # 1000 Hz × 0.01 s


def test_bias_limits_come_from_the_bench_file(sim_bench):
    spec = bench_from_mapping(sim_bench.bench_mapping())
    with open_bench(spec, roles=["bias"]) as bench:
        with pytest.raises(SafetyLimitError):
            bench.bias.start_ramp(spec.instruments["bias"].max_volts + 1.0, 1.0)
        bench.bias.start_ramp(10.0, 5.0)
        assert bench.bias.setpoint() == pytest.approx(10.0)
        assert bench.bias.interlock_closed() is True


def test_recovers_from_a_dropped_link_and_a_garbled_reply(tmp_path):
    text = BOARD.read_text().replace(
        "faults: []",
        "faults: [{kind: disconnect, role: scope, after_commands: 3},"
        " {kind: garbled_reply, role: threshold, after_commands: 1}]",
    )
    board = tmp_path / "faulty.yaml"
    board.write_text(text)
    with sim.start_sim_bench(board) as running:
        spec = bench_from_mapping(running.bench_mapping())
        with open_bench(spec, roles=["scope", "threshold"]) as bench:
            # the generic dialect joins commands and their error query (drivers/scpi/messages.py):
            # *IDN?, two set-up messages at open, then set_input in one message (the 4th): dropped
            bench.scope.set_input(1, range_mV=500.0)
            assert bench.scope.sample_rate_hz() > 0
            assert bench.scope.session.reconnects == 1
            # *IDN?, then the level and its error query in one message: that reply is garbled
            bench.threshold.set_level(1, 12.5)
            assert bench.threshold.level_mV(1) == pytest.approx(12.5)
            assert bench.threshold.session.resyncs == 1 and bench.threshold.session.reconnects == 0


def test_instruments_check_asks_every_query_and_leaves_the_bias_alone(sim_bench):
    from drivers.check import check_bench

    spec = bench_from_mapping(sim_bench.bench_mapping())
    with open_bench(spec, roles=["bias"]) as bench:
        before = (bench.bias.output_on(), bench.bias.setpoint())
    lines = check_bench(spec)
    text = "\n".join(lines)
    assert "FAILED" not in text and " ERROR " not in text, text
    # each query of the generic dialect, parsed as the driver would read it
    assert "bias.interlock_closed" in text and "-> True (bool)" in text
    assert "bias.measure_voltage" in text and "scope.preamble" in text
    capture = next(line for line in lines if "scope.capture" in line)
    assert " points, " in capture and "FAILED" not in capture
    # the gated queries after one gate of the present gate time (the sim's 0.1 s, read back on the
    # get_gate_time line); the channel-list query about one relay, parsed as the list it is
    gate = (
        next(line for line in lines if "counter.get_gate_time" in line).split("-> ")[1].split()[0]
    )
    counts = next(line for line in lines if "counter.counts" in line)
    assert f"(int) over one {gate} s gate on channel 1" in counts, counts
    assert int(counts.split("-> ")[1].split()[0]) >= 0
    coincidences = next(line for line in lines if "coincidence.counts" in line)
    assert "'FETCh:COINcidence?' -> [" in coincidences and "] (csv) over one " in coincidences
    assert "'ROUTe:CLOSe? (@101)' -> [0.0] (csv)" in text  # nothing routed to injection at rest
    with open_bench(spec, roles=["bias"]) as bench:
        assert (bench.bias.output_on(), bench.bias.setpoint()) == before  # nothing changed


def test_instruments_check_leaves_a_long_gate_to_a_run(sim_bench):
    from drivers.check import MAX_CHECK_GATE_S, check_bench

    spec = bench_from_mapping(sim_bench.bench_mapping())
    with open_bench(spec, roles=["counter"]) as bench:
        bench.counter.set_gate(MAX_CHECK_GATE_S * 2)
    lines = check_bench(spec)
    counts = next(line for line in lines if "counter.counts" in line)
    assert f"skipped: the present gate of {MAX_CHECK_GATE_S * 2:g} s is longer" in counts, counts
