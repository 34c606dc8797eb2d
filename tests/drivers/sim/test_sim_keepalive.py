"""The simulated supply's keep-alive (drivers/sim/bias.py): armed, it switches the output off when
no message arrives for longer than its time -- at the moment the time ran out -- and not while
messages keep coming.  A fake clock: no wall-clock bound anywhere."""

from __future__ import annotations

import pytest

from tests.drivers.sim.simkit import FakeClock, make_board, no_errors

BOARD = make_board()


def live_at_10V(bench_of, clock: FakeClock):
    bias = bench_of(BOARD, clock=clock).bias
    bias.write("VOLT:SLEW 10;:VOLT 10;:OUTP ON;:OUTP:KEEP 5")
    no_errors(bias)
    clock.advance(2.0)  # 10 V at 10 V/s: there after 1 s
    assert float(bias.query("MEAS:VOLT?")) == pytest.approx(10.0, abs=0.01)
    return bias


def test_a_silent_client_gets_the_output_switched_off(bench_of):
    clock = FakeClock()
    bias = live_at_10V(bench_of, clock)
    clock.advance(5.5)  # more than 5 s without a message
    assert bias.query("OUTP?") == "0"
    assert abs(float(bias.query("MEAS:VOLT?"))) < 0.01


def test_messages_keep_it_alive_and_zero_disarms_it(bench_of):
    clock = FakeClock()
    bias = live_at_10V(bench_of, clock)
    for _ in range(4):  # 16 s in all, a message every 4 s
        clock.advance(4.0)
        assert bias.query("OUTP?") == "1"
    bias.write("OUTP:KEEP 0")
    no_errors(bias)
    clock.advance(60.0)
    assert bias.query("OUTP?") == "1" and bias.query("OUTP:KEEP?") == "0"
