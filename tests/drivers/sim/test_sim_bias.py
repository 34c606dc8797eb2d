"""Simulated bias supply: Ohm's-law leakage current, real-time ramp, trips, interlock fault, the
SCPI-1999 optional-node forms of DESIGN.md, and two clients sharing one supply."""

from __future__ import annotations

import time

import pytest

from tests.drivers.sim.simkit import FakeClock, make_board, no_errors, open_role

BOARD = make_board()


def test_bias_current_is_v_over_r(bench_of):
    s = bench_of(BOARD)
    bias = s.bias
    bias.write("SOUR:VOLT:SLEW 1000")
    bias.write("SOUR:VOLT:LEV:IMM:AMPL 50")
    bias.write("OUTP:STAT ON")
    no_errors(bias)
    time.sleep(0.08)  # 50 V at 1000 V/s: 50 ms
    volts = float(bias.query("MEAS:VOLT:DC?"))
    amps = float(bias.query("MEAS:CURR:DC?"))
    assert volts == pytest.approx(50.0, abs=0.01)
    # Ohm's law, I = V / R with R = bias_resistance_Mohm (DESIGN.md), plus the documented
    # 0.02 nA meter offset (drivers/sim/board.py) and 0.002 nA noise
    assert amps == pytest.approx(50.0 / 5000e6 + 0.02e-9, abs=0.02e-9)


def test_ramp_follows_the_slew_rate_in_time(bench_of):
    clock = FakeClock()
    s = bench_of(BOARD, clock=clock)
    bias = s.bias
    bias.write("VOLT:SLEW 2;:VOLT 10;:OUTP ON")
    no_errors(bias)
    clock.advance(2.5)
    assert float(bias.query("MEAS:VOLT?")) == pytest.approx(5.0, abs=0.01)  # 2 V/s x 2.5 s
    bias.write("VOLT 4")  # ramp down from 5 V toward 4 V
    no_errors(bias)  # the write has been acted on before the clock moves
    clock.advance(0.25)
    assert float(bias.query("MEAS:VOLT?")) == pytest.approx(4.5, abs=0.01)
    clock.advance(10)
    assert float(bias.query("MEAS:VOLT?")) == pytest.approx(4.0, abs=0.01)
    bias.write("OUTP OFF")
    no_errors(bias)
    assert abs(float(bias.query("MEAS:VOLT?"))) < 0.01
    assert bias.query("VOLT?") == "4"  # the set point is kept


def test_current_limit_trips_the_output(bench_of):
    clock = FakeClock()
    s = bench_of(BOARD, clock=clock)
    bias = s.bias
    bias.write("CURR:LIM 5e-9;:VOLT:SLEW 100;:VOLT 50;:OUTP ON")
    no_errors(bias)
    clock.advance(1.0)  # 50 V / 5000 MOhm = 10 nA > 5 nA
    assert bias.query("OUTP:PROT:TRIP?") == "1"
    assert bias.query("OUTP?") == "0"
    bias.write("OUTP ON")
    assert bias.query("SYST:ERR?") == '-221,"Settings conflict"'
    bias.write("OUTP:PROT:CLE;:CURR:LIM 1e-6;:OUTP ON")
    no_errors(bias)
    assert bias.query("OUTP?") == "1"


def test_interlock_opens_after_s_from_first_output_on(bench_of):
    clock = FakeClock()
    s = bench_of(make_board(faults=[{"kind": "interlock_open", "after_s": 2.0}]), clock=clock)
    bias = s.bias
    clock.advance(100)  # time before the output first turns on does not count
    assert bias.query("SYST:INT:STAT?") == "1"
    bias.write("VOLT 20;:OUTP ON")
    no_errors(bias)
    clock.advance(1.9)
    assert bias.query("OUTP?;:SYST:INT?") == "1;1"
    clock.advance(0.2)
    assert bias.query("OUTPut:STATe?") == "0"  # tripped off, as real supplies do
    assert bias.query("SYSTem:INTerlock:STATe?") == "0"
    assert bias.query("OUTP:PROT:TRIP?") == "1"
    assert abs(float(bias.query("MEAS:VOLT?"))) < 0.01
    bias.write("OUTP:PROT:CLE")
    assert bias.query("SYST:ERR?") == '-221,"Settings conflict"'


@pytest.mark.parametrize(
    "header",
    [
        "VOLT?",
        "SOUR:VOLT?",
        "VOLTage:LEVel?",
        "SOURce:VOLTage:LEVel:IMMediate:AMPLitude?",
        "volt:imm?",
        ":SOUR:VOLT:AMPL?",
        "source:voltage:level:immediate:amplitude?",
    ],
)
def test_optional_nodes_short_and_long_forms(bench_of, header):
    s = bench_of(BOARD)
    s.bias.write("SOURce:VOLTage 12.5")
    assert (
        s.bias.query(header) == "12.5"
    )  # SCPI-1999 [SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]?
    for query in (
        "OUTP?",
        "OUTPut:STATe?",
        "MEAS:VOLT?",
        "MEASure:VOLTage:DC?",
        "MEAS:CURR?",
        "MEASure:CURRent:DC?",
    ):
        float(s.bias.query(query))
    no_errors(s.bias)


def test_two_clients_share_one_supply(bench_of, rm):
    s = bench_of(BOARD)
    watcher = open_role(rm, s.bench, "bias")
    try:
        s.bias.write("VOLT 33;:OUTP ON")
        no_errors(s.bias)
        assert watcher.query("VOLT?;:OUTP?") == "33;1"
    finally:
        watcher.close()


def test_out_of_range_and_bad_parameters(bench_of):
    s = bench_of(BOARD)
    s.bias.write("VOLT 500")
    assert s.bias.query("SYST:ERR?") == '-222,"Data out of range"'
    s.bias.write("VOLT banana")
    assert s.bias.query("SYST:ERR?") == '-104,"Data type error"'
    s.bias.write("VOLT MAX")
    assert float(s.bias.query("VOLT?")) == 80.0
    s.bias.write("OUTP")
    assert s.bias.query("SYST:ERR?") == '-109,"Missing parameter"'
