"""Simulated coincidence unit over real sockets (pyvisa-py) and through the role driver: accidentals of
two independent Poisson trains against R_acc = 2τR₁R₂ (REFERENCES.md, standard), the delay curve of
the pulser's correlated pulses (width 2τ, plateau = pulser rate × efficiencies), the wide-resolving-
time fault, thresholds, repeatability and refusals."""

from __future__ import annotations

import math

import numpy as np
import pytest

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim.coincidence import count_coincidences
from sequencer.analysis import accidental_rate_hz, fit_delay_curve
from tests.drivers.sim.simkit import make_board, no_errors


def test_counting_kernel_matches_a_brute_force_pair_search():
    rng = np.random.default_rng(3)
    t1, t2 = rng.uniform(0, 1e-3, 300), rng.uniform(0, 1e-3, 500)
    brute = int((np.abs(np.subtract.outer(t1, t2)) < 2e-6).any(axis=1).sum())
    assert count_coincidences(t1, t2, 2e-6) == brute > 0
    assert count_coincidences(t1, np.empty(0), 2e-6) == 0


def test_accidentals_of_two_independent_trains(bench_of):
    board = make_board(coincidence={"singles1_hz": 20e3, "singles2_hz": 40e3, "jitter_ns": 0.0})
    s = bench_of(board)
    u = s.coincidence
    u.timeout = 60_000  # a 1.2-million-pulse draw on a loaded machine
    u.write("SENS:COIN:WIND 50e-9;:SENS:GATE:TIME 20")
    u.write("INIT")
    coinc, s1, s2 = (int(v) for v in u.query("FETC:COIN?").split(","))
    no_errors(u)
    gate = 20.0
    assert abs(s1 - 4e5) < 5 * math.sqrt(4e5) and abs(s2 - 8e5) < 5 * math.sqrt(8e5)
    # R_acc = 2τR₁R₂ (REFERENCES.md): 2·50 ns·20 kHz·40 kHz = 80 Hz -> 1600 counts in 20 s, from
    # the measured singles rates; the 2τR₂ = 0.4 % second-order excess is far inside 4σ
    expected = accidental_rate_hz(50.0, s1 / gate, s2 / gate) * gate
    assert abs(coinc - expected) < 4 * math.sqrt(expected)


def delay_scan(unit, delays_ns, gate_s=0.1):
    rates = []
    for d in delays_ns:
        unit.set_relative_delay(float(d))
        rates.append(unit.count().coincidence_rate_hz)
    return np.array(rates)


@pytest.mark.parametrize(
    "extra_ns,skew_ns,efficiencies", [(0.0, 0.0, (1.0, 1.0)), (15.0, 6.0, (0.9, 0.95))]
)
def test_delay_curve_through_the_driver(extra_ns, skew_ns, efficiencies):
    from drivers.sim import start_sim_bench

    board = make_board(
        coincidence={
            "resolving_extra_ns": extra_ns,
            "skew_ns": skew_ns,
            "efficiency1": efficiencies[0],
            "efficiency2": efficiencies[1],
            "singles1_hz": 500.0,
            "singles2_hz": 500.0,
        }
    )
    with start_sim_bench(board) as running:
        spec = bench_from_mapping(running.bench_mapping())
        with open_bench(spec, roles=["pulser", "coincidence"]) as bench:
            bench.pulser.set_rate(10e3)
            bench.pulser.set_amplitude(100.0)
            bench.pulser.set_output(True)
            unit = bench.coincidence
            unit.set_window(20.0)
            unit.set_gate(0.2)
            delays = np.arange(-80.0, 80.1, 2.0)
            curve = fit_delay_curve(delays, delay_scan(unit, delays))
    tau = 20.0 + extra_ns  # truth: the set window plus the board's extra resolving time
    assert curve.resolving_time_ns == pytest.approx(tau, abs=1.0)
    # input 2 arrives skew_ns late: the curve is centred where input 1 is delayed to match it
    assert curve.centre_ns == pytest.approx(-skew_ns, abs=1.0)
    plateau = 10e3 * efficiencies[0] * efficiencies[1]  # correlated pulses both inputs fired on
    assert curve.plateau_hz == pytest.approx(plateau, abs=5 * curve.plateau_uncertainty_hz + 30)


def test_threshold_above_the_pulses_silences_an_input_and_counts_repeat(bench_of):
    board = make_board(coincidence={"correlated_hz": 1e4, "height_mV": 50.0, "noise_mV": 1.0})
    s = bench_of(board)
    u = s.coincidence

    def gate() -> tuple[int, ...]:
        u.write("INIT")
        return tuple(int(v) for v in u.query("FETC:COIN?").split(","))

    u.write("SENS:GATE:TIME 0.1;:INP1:THR 0.045")  # 5 σ below the 50 mV pulses: all fire
    first = gate()
    assert first[1] == first[2] == first[0] > 900
    u.write("INP1:THR 0.06")  # 10 σ above: input 1 never fires
    assert gate()[:2] == (0, 0)
    no_errors(u)
    assert float(u.query("INP1:THR?")) == pytest.approx(0.06)
    u.write("*RST")
    assert float(u.query("SENS:COIN:WIND?")) == pytest.approx(20e-9)


def test_repeatable_with_the_same_seed(bench_of):
    board = make_board(coincidence={"singles1_hz": 5e4, "singles2_hz": 5e4})
    results = []
    for _ in range(2):
        u = bench_of(board).coincidence
        u.write("SENS:GATE:TIME 0.5;:INIT")
        results.append(u.query("FETC:COIN?"))
    assert results[0] == results[1]


def test_refusals(bench_of):
    s = bench_of(make_board(coincidence={"singles1_hz": 1e8, "singles2_hz": 1e8}))
    u = s.coincidence
    u.write("FETC:COIN?")
    assert u.read() == "0,0,0"
    assert u.query("SYST:ERR?").startswith("-230")  # no gate yet: stale
    u.write("SENS:GATE:TIME 1;:INIT")  # 2e8 pulses: beyond the simulator's budget
    assert u.query("SYST:ERR?").startswith("-221")
    u.write("SENS:COIN:WIND 2e-6")
    assert u.query("SYST:ERR?").startswith("-222")
    u.write("INP3:DEL 1e-9")
    assert u.query("SYST:ERR?").startswith("-114")
