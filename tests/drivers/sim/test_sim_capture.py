"""Simulated digitizer against the board file (DESIGN.md "Simulated board file" physics) and the
shaping tables of REFERENCES.md, all through pyvisa-py over real sockets."""

from __future__ import annotations

import math

import numpy as np
import pytest

from drivers.sim import MAKER
from tests.drivers.sim.simkit import fetch, make_board, no_errors, peak

BOARD = make_board()


def arm(
    s,
    *,
    routes: str,
    inject: int | None,
    amplitude_V: float = 0.1,
    rate: float = 1e9,
    points: int = 1000,
    averages: int = 64,
    ranges: tuple[float, ...] = (1.0, 1.0, 1.0, 1.0),
    pretrigger_s: float = 100e-9,
) -> None:
    """Route, inject, set the pulser and the scope, acquire once."""
    s.switch.write("ROUT:OPEN:ALL")
    s.switch.write(f"ROUT:CLOS (@{routes})")
    if inject is not None:
        s.switch.write(f"ROUT:CLOS (@{100 + inject})")
    s.pulser.write(f"SOUR:VOLT {amplitude_V};:OUTP {'ON' if inject is not None else 'OFF'}")
    for inst in (s.switch, s.pulser):  # each instrument is its own socket: wait until it has acted
        no_errors(inst)
    scope = s.scope
    scope.write(f"SENS:SWE:SRAT {rate};POIN {points}")
    scope.write(f"SENS:AVER:COUN {averages}")
    scope.write(f"TRIG:SEQ:DEL {pretrigger_s}")
    for i, full_scale in enumerate(ranges, start=1):
        scope.write(f"SENS:VOLT{i}:RANG:UPP {full_scale}")
    scope.write("INIT:IMM")
    assert scope.query("*OPC?") == "1"
    no_errors(scope)


def height(t_ns: np.ndarray, v: np.ndarray) -> float:
    """Pulse height above the pre-trigger baseline (parabolic peak)."""
    return peak(t_ns, v)[1] - float(np.mean(v[t_ns < 0]))


def test_plain_pyvisa_session_meets_the_done_criterion(bench_of):
    s = bench_of(BOARD)
    for role in s.bench.ports:
        inst = getattr(s, role)
        fields = inst.query("*IDN?").split(",")
        assert (
            len(fields) == 4 and fields[0] == MAKER
        )  # IEEE 488.2 §10.14: four fields (from memory)
        assert inst.query("SYSTem:ERRor?") == '0,"No error"'
        inst.write("NO:SUCH:HEADer 1")
        assert inst.query("SYST:ERR?") == '-113,"Undefined header"'  # SCPI-1999 standard code
    arm(s, routes="1101", inject=1, amplitude_V=0.05, rate=5e9, points=2000)
    t, v = fetch(s.scope, 1)
    ch = BOARD.channels[0]
    expected = ch.saturation_mV * math.tanh(ch.gain_x1 * 50.0 / ch.saturation_mV)  # DESIGN.md
    assert height(t, v) == pytest.approx(expected, rel=0.005)


@pytest.mark.parametrize("output,k", [("x1", 1), ("x5", 2)])
def test_gain_from_a_line_fit_within_half_a_percent(bench_of, output, k):
    s = bench_of(BOARD)
    amplitudes = np.array([5.0, 10.0, 15.0, 20.0])
    heights = []
    for a in amplitudes:
        arm(
            s,
            routes=f"1{k}01",
            inject=1,
            amplitude_V=a / 1e3,
            rate=5e9,
            points=2000,
            averages=1024,
            ranges=(0.25, 1, 1, 1),
        )
        heights.append(height(*fetch(s.scope, 1)))
    gain, _ = np.polyfit(amplitudes, heights, 1)  # gain = slope of the best-fit line (DESIGN.md)
    nominal = getattr(BOARD.channels[0], f"gain_{output}")
    assert gain == pytest.approx(nominal, rel=0.005)


def test_tanh_compression_at_the_saturation_amplitude(bench_of):
    s = bench_of(BOARD)
    ch = BOARD.channels[0]
    a = ch.saturation_mV / ch.gain_x5  # g·A/S = 1
    arm(
        s,
        routes="1201",
        inject=1,
        amplitude_V=a / 1e3,
        rate=5e9,
        points=2000,
        ranges=(3.0, 1, 1, 1),
    )
    h = height(*fetch(s.scope, 1))
    # DESIGN.md: S·tanh(g·A/S); tanh(1) = 0.7615941559557649 (numpy/math)
    assert h == pytest.approx(ch.saturation_mV * 0.7615941559557649, rel=0.005)
    assert h < 0.8 * ch.gain_x5 * a  # clearly below the linear response


def test_baseline_rms_is_noise_times_gain_and_falls_as_root_n(bench_of):
    s = bench_of(BOARD)
    rms = {}
    for n in (1, 16):
        arm(
            s,
            routes="1101,2201,3202",
            inject=None,
            points=20000,
            averages=n,
            ranges=(0.05, 0.05, 0.05, 1),
        )
        rms[n] = [float(np.std(fetch(s.scope, i)[1])) for i in (1, 2, 3)]
    expected = [
        BOARD.channels[0].noise_in_mV * BOARD.channels[0].gain_x1,
        BOARD.channels[0].noise_in_mV * BOARD.channels[0].gain_x5,
        BOARD.channels[1].noise_in_mV * BOARD.channels[1].gain_x5,
    ]
    for n, values in rms.items():
        for got, want in zip(values, expected, strict=True):
            # white noise averaged over N traces falls as 1/√N (REFERENCES.md "Noise")
            assert got == pytest.approx(want / math.sqrt(n), rel=0.05)


def test_x1_and_x5_share_the_preamp_noise(bench_of):
    s = bench_of(BOARD)
    arm(s, routes="1101,2201", inject=None, points=20000, averages=1, ranges=(0.05, 0.05, 1, 1))
    x1, x5 = fetch(s.scope, 1)[1], fetch(s.scope, 2)[1]
    # the same input noise through two gains (common practice): strongly correlated outputs
    assert np.corrcoef(x1, x5)[0, 1] > 0.95


def test_crosstalk_into_both_neighbours(bench_of):
    s = bench_of(BOARD)
    arm(
        s,
        routes="1101,2102,3103",
        inject=2,
        amplitude_V=0.5,
        points=1000,
        averages=256,
        ranges=(0.02, 1.0, 0.02, 1),
    )
    t, victim1 = fetch(s.scope, 1)
    _, aggressor = fetch(s.scope, 2)
    _, victim3 = fetch(s.scope, 3)
    for victim in (victim1, victim3):
        ratio_pct = (
            100 * height(t, victim) / height(t, aggressor)
        )  # REFERENCES.md crosstalk definition
        assert ratio_pct == pytest.approx(BOARD.crosstalk_pct, rel=0.03)


def test_dead_channel_shows_only_noise(bench_of):
    s = bench_of(BOARD)
    arm(
        s,
        routes="1104,2103",
        inject=4,
        amplitude_V=0.5,
        points=5000,
        averages=1,
        ranges=(0.05, 0.05, 1, 1),
    )
    dead, neighbour = fetch(s.scope, 1)[1], fetch(s.scope, 2)[1]
    ch4, ch3 = BOARD.channels[3], BOARD.channels[2]
    assert np.std(dead) == pytest.approx(ch4.noise_in_mV * ch4.gain_x1, rel=0.1)
    assert np.max(np.abs(neighbour - ch3.baseline_mV)) < 6 * ch3.noise_in_mV * ch3.gain_x1


def test_fast_rise_time_is_the_board_files(bench_of):
    board = make_board(pulse={"rise_ns": 3.0, "decay_ns": 30.0})
    s = bench_of(board)
    arm(
        s,
        routes="1101",
        inject=1,
        amplitude_V=0.2,
        rate=5e9,
        points=1000,
        averages=256,
        ranges=(0.5, 1, 1, 1),
    )
    t, v = fetch(s.scope, 1)
    v = v - np.mean(v[t < 0])
    top = peak(t, v)[1]
    rising = slice(0, int(np.argmax(v)) + 1)
    # IEEE 181: 10 % and 90 % reference levels, crossings linearly interpolated
    t10 = np.interp(0.1 * top, v[rising], t[rising])
    t90 = np.interp(0.9 * top, v[rising], t[rising])
    assert t90 - t10 == pytest.approx(3.0, rel=0.03)


def test_unipolar_peaking_time_is_n_tau(bench_of):
    s = bench_of(BOARD)  # CR-RC^4, tau 50 ns
    arm(s, routes="1301", inject=1, amplitude_V=0.1, points=1000, averages=64)
    t, v = fetch(s.scope, 1)
    t_peak, _ = peak(t, v)
    assert t_peak == pytest.approx(4 * 50.0, abs=1.0)  # Spieler 2005 ch. 4: peak at n·τ
    ch = BOARD.channels[0]
    assert height(t, v) == pytest.approx(
        ch.saturation_mV * math.tanh(ch.gain_x1 * 100 / ch.saturation_mV), rel=0.005
    )


def test_bipolar_zero_crossing_and_lobes(bench_of):
    board = make_board(shaper={"order": 2, "tau_ns": 40, "kind": "bipolar"}, pulse_delay_ns=20.0)
    s = bench_of(board)
    arm(s, routes="1301", inject=1, amplitude_V=0.2, points=1000, averages=256, pretrigger_s=50e-9)
    t, v = fetch(s.scope, 1)
    v = v - np.mean(v[t < 0])
    start = 20.0  # pulse_delay_ns
    t_pos, v_pos = peak(t, v)
    t_neg, v_neg = peak(t, -v)
    after = (t > t_pos) & (t < t_neg)
    t_zero = np.interp(0.0, -v[after], t[after])
    # REFERENCES.md (Spieler 2005 ch. 4), n = 2: zero crossing (n+1)τ, positive peak (n+1-√(n+1))τ,
    # |negative| / positive lobe 0.435968
    assert t_zero - start == pytest.approx(3 * 40.0, abs=1.0)
    assert t_pos - start == pytest.approx((3 - math.sqrt(3)) * 40.0, abs=1.0)
    assert v_neg / v_pos == pytest.approx(0.435968, rel=0.01)


@pytest.mark.parametrize(
    "polarity,inverter,sign",
    [("negative", False, -1), ("negative", True, 1), ("positive", True, -1)],
)
def test_polarity_and_inverter(bench_of, polarity, inverter, sign):
    s = bench_of(make_board(polarity=polarity, inverter=inverter))
    arm(s, routes="1101,2301", inject=1, amplitude_V=0.1)
    _, fast = fetch(s.scope, 1)
    _, shaped = fetch(s.scope, 2)
    base = BOARD.channels[0].baseline_mV
    assert sign * (fast[np.argmax(np.abs(fast - base))] - base) > 90
    assert np.max(shaped) - base > 90  # the shaper output stays positive-going


def test_clipping_quantisation_byte_order_and_real32(bench_of):
    s = bench_of(make_board(adc_bits=10))
    arm(s, routes="1101", inject=1, amplitude_V=0.3, averages=1, ranges=(0.2, 1, 1, 1))
    scope = s.scope
    raw = scope.query_binary_values(
        "TRAC:DATA? CHAN1", datatype="h", is_big_endian=True, container=np.array
    )
    step = 2 ** (16 - 10)
    assert np.all(raw % step == 0)  # a 10-bit ADC in a 16-bit word
    assert raw.max() == (2**9 - 1) * step  # clipped at the top of the range
    scope.write("FORM:BORD SWAP")
    swapped = scope.query_binary_values(
        "TRAC:DATA? CHAN1", datatype="h", is_big_endian=False, container=np.array
    )
    assert np.array_equal(swapped, raw)
    scope.write("FORMat:BORDer NORMal;:FORMat:DATA REAL,32")
    assert scope.query("FORM:DATA?") == "REAL,32"
    volts = scope.query_binary_values(
        "TRAC:DATA? CHAN1", datatype="f", is_big_endian=True, container=np.array
    )
    pre = [float(x) for x in scope.query("TRAC:PRE? CHAN1").split(",")]
    assert pre[2:4] == [1.0, 0.0]
    np.testing.assert_allclose(volts, raw * 0.2 / 65536, rtol=1e-6, atol=1e-9)
    no_errors(scope)


def test_data_before_any_acquisition_is_stale(bench_of):
    s = bench_of(BOARD)
    assert (
        s.scope.query_binary_values("TRAC:DATA? CHAN1", datatype="h", container=np.array).size == 0
    )
    assert s.scope.query("SYST:ERR?") == '-230,"Data corrupt or stale"'
