"""Simulated discriminator and counter: the S-curve (REFERENCES.md "Threshold scans"), Rice noise
firings, burst and gate logic, drawn counts, gate timing; through pyvisa-py over real sockets."""

from __future__ import annotations

import math
import threading
import time

import numpy as np
import pytest
from scipy.optimize import curve_fit
from scipy.stats import norm

from tests.drivers.sim.simkit import make_board, no_errors

BOARD = make_board()


def configure(
    s,
    *,
    inject: int | None,
    channel: int,
    amplitude_V: float = 0.1,
    frequency: float = 1e4,
    gate_s: float = 0.1,
    burst: int | None = None,
) -> None:
    s.switch.write("ROUT:OPEN:ALL")
    if inject is not None:
        s.switch.write(f"ROUT:CLOS (@{100 + inject})")
    s.pulser.write(f"SOUR:VOLT:LEV:IMM:AMPL {amplitude_V}")
    s.pulser.write(f"SOUR:FREQ:CW {frequency}")
    s.pulser.write(f"SOUR:BURS:NCYC {burst or 1};:SOUR:BURS:STAT {'ON' if burst else 'OFF'}")
    s.pulser.write(f"OUTP:STAT {'ON' if inject is not None else 'OFF'}")
    s.counter.write(f"SENS:GATE:TIME {gate_s}")
    s.counter.write(f"ROUT:TERM:CHAN {channel}")
    for inst in (s.switch, s.pulser, s.counter):
        no_errors(inst)


def count_at(s, channel: int, threshold_mV: float) -> int:
    s.threshold.write(f"SOUR{channel}:VOLT:LEV:IMM:AMPL {threshold_mV / 1e3:.9g}")
    no_errors(s.threshold)
    s.counter.write("INIT:IMM")
    return int(s.counter.query("FETC:TOT?"))


def test_s_curve_fifty_percent_point_and_width(bench_of):
    s = bench_of(BOARD)
    ch = BOARD.channels[0]
    configure(s, inject=1, channel=1, amplitude_V=0.1)
    h = ch.saturation_mV * math.tanh(
        ch.gain_x1 * 100.0 / ch.saturation_mV
    )  # DESIGN.md pulse height
    mu = h + ch.discriminator_offset_mV  # DESIGN.md: fires when h + noise > thr - offset
    sigma = ch.noise_in_mV * ch.gain_x1
    thresholds = mu + sigma * np.linspace(-3, 3, 25)
    trials = 1000  # 10 kHz x 0.1 s
    counts = np.array([count_at(s, 1, thr) for thr in thresholds])
    assert np.all((counts >= 0) & (counts <= trials))
    # efficiency = norm.sf(thr, mu, sigma) (REFERENCES.md), weights from (k+1)/(N+2) (Ullrich & Xu 2003)
    eff = (counts + 1) / (trials + 2)
    err = np.sqrt(eff * (1 - eff) / trials)
    (mu_fit, sigma_fit), _ = curve_fit(
        lambda x, m, w: norm.sf(x, m, w),
        thresholds,
        counts / trials,
        p0=[thresholds[12], 0.5],
        sigma=err,
    )
    assert mu_fit == pytest.approx(mu, abs=0.03)
    assert sigma_fit == pytest.approx(sigma, rel=0.06)


def test_counts_are_drawn_not_the_expectation(bench_of):
    s = bench_of(BOARD)
    ch = BOARD.channels[0]
    configure(s, inject=1, channel=1, amplitude_V=0.1)
    mu = (
        ch.saturation_mV * math.tanh(ch.gain_x1 * 100.0 / ch.saturation_mV)
        + ch.discriminator_offset_mV
    )
    counts = np.array([count_at(s, 1, mu) for _ in range(30)])
    assert len(set(counts.tolist())) > 5
    # Binomial(1000, 0.5): mean 500, variance 250 (standard); 5-sigma bounds on the sample mean
    assert abs(counts.mean() - 500) < 5 * math.sqrt(250 / 30)
    assert 250 / 3 < counts.var(ddof=1) < 250 * 3


def test_burst_mode_sends_exactly_the_burst_count(bench_of):
    s = bench_of(BOARD)
    configure(s, inject=1, channel=1, amplitude_V=0.1, burst=437, gate_s=1.0)
    assert count_at(s, 1, 50.0) == 437  # far below the pulse height: every pulse fires
    assert count_at(s, 1, 200.0) == 0  # far above it, and no noise firings while pulsing


def test_no_pulse_firings_on_another_channel_or_with_the_output_off(bench_of):
    s = bench_of(BOARD)
    configure(s, inject=1, channel=2, amplitude_V=0.1)
    assert count_at(s, 2, 50.0) == 0  # 50 mV is ~200 sigma above channel 2's baseline noise
    configure(s, inject=None, channel=1)
    assert count_at(s, 1, 50.0) == 0


def test_dead_channel_never_fires_on_pulses(bench_of):
    s = bench_of(BOARD)
    configure(s, inject=4, channel=4, amplitude_V=0.5)
    assert count_at(s, 4, 20.0) == 0


def test_noise_firings_follow_the_rice_rate(bench_of):
    s = bench_of(BOARD)
    ch = BOARD.channels[0]
    sigma = ch.noise_in_mV * ch.gain_x1
    gate = 0.01
    configure(s, inject=None, channel=1, gate_s=gate)
    u = 3 * sigma
    counts = count_at(s, 1, u + ch.discriminator_offset_mV)
    # Rice (1944): nu = nu0 exp(-u^2 / 2 sigma^2), CR-RC^2 nu0 = sqrt(3) / (2 pi tau); tau = the
    # board's discriminator_tau_ns (default 5 ns, documented in drivers/sim/board.py)
    expected = math.sqrt(3) / (2 * math.pi * 5e-9) * math.exp(-4.5) * gate
    assert abs(counts - expected) < 5 * math.sqrt(expected)


def test_gate_takes_real_time_with_time_scale_and_frees_the_bench(bench_of):
    s = bench_of(make_board(time_scale=1.0))
    configure(s, inject=1, channel=1, gate_s=1.0)
    s.counter.write("INIT")
    started = time.perf_counter()
    order: list[str] = []
    worker = threading.Thread(
        target=lambda: order.append("counter " + s.counter.query("FETC:TOT?"))
    )
    worker.start()
    time.sleep(0.05)
    assert s.pulser.query("*IDN?")
    order.append("pulser")
    worker.join(timeout=10)
    # another instrument answered while the gate ran: its reply came before the counter's (order,
    # no upper bound on time); the gate itself took at least its second
    assert [o.split()[0] for o in order] == ["pulser", "counter"], order
    assert time.perf_counter() - started >= 0.95


def test_fetch_without_a_gate_is_stale(bench_of):
    s = bench_of(BOARD)
    assert s.counter.query("FETCh:TOTalize?") == "0"
    assert s.counter.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
