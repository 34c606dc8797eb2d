"""Simulated digitizer with a sine input: the converter model read back through pyvisa-py over real
sockets and the project's analyses.  References: an ideal N-bit converter's ENOB within 0.1 bit of N
(REFERENCES.md "Digitizers", IEEE 1241); the code-density test recovers the injected missing codes
and DNL pattern (IEEE 1241 histogram test, clause from memory); a one-pole bandwidth attenuates a sine
at f_c by 1/√2 (circuit theory, standard)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from drivers.sim.board import ConverterSpec
from drivers.sim.converter import code_widths
from sequencer.analysis import code_density, fit_sine_4
from tests.drivers.sim.simkit import fetch, make_board, no_errors

FS = 500e6
RANGE_V = 1.0
BITS = 10


def capture_codes(
    s, *, frequency: float, amplitude_V: float, points: int = 65536, bits: int = BITS
) -> np.ndarray:
    s.pulser.write(
        f"SOUR:FUNC:SHAP SIN;:SOUR:FREQ:CW {frequency};:SOUR:VOLT:LEV:IMM:AMPL {amplitude_V}"
    )
    s.pulser.write("SOUR:VOLT:LEV:IMM:OFFS 0;:OUTP:STAT ON")
    assert s.pulser.query("*OPC?") == "1"  # the generator is set before the scope acquires
    s.scope.write(f"SENS:SWE:SRAT {FS};:SENS:SWE:POIN {points};:SENS:VOLT1:RANG:UPP {RANGE_V}")
    s.scope.timeout = 30_000
    s.scope.write("INIT")
    _, mV = fetch(s.scope, 1)
    no_errors(s.scope)
    no_errors(s.pulser)
    q_mV = RANGE_V * 1e3 / 2**bits
    codes = mV / q_mV + 2 ** (bits - 1)
    assert np.allclose(codes, np.rint(codes), atol=1e-3)  # raw converter codes, not averaged
    return np.rint(codes).astype(np.int64)


def test_ideal_converter_enob_is_its_resolution(bench_of):
    s = bench_of(make_board(adc_bits=BITS, converter={"noise_lsb": 0.0}))
    codes = capture_codes(s, frequency=9.876543e6, amplitude_V=0.499)
    fit = fit_sine_4(codes.astype(float), FS, 9.876543e6)
    assert abs(fit.enob - BITS) < 0.1  # REFERENCES.md: ideal N-bit quantiser


def test_noisy_converter_loses_the_expected_bits(bench_of):
    s = bench_of(make_board(adc_bits=BITS, converter={"noise_lsb": 0.5}))
    codes = capture_codes(s, frequency=9.876543e6, amplitude_V=0.499)
    fit = fit_sine_4(codes.astype(float), FS, 9.876543e6)
    # white noise σ (LSB) adds to the quantisation variance 1/12: ENOB falls by ½·log2(1 + 12σ²),
    # 1 bit at σ = 0.5 LSB (IEEE 1241 noise-to-ENOB relation, from memory)
    assert fit.enob == pytest.approx(BITS - 0.5 * math.log2(1 + 12 * 0.5**2), abs=0.1)


def test_code_density_finds_the_missing_codes_and_the_dnl_pattern(bench_of):
    spec = {"noise_lsb": 0.2, "dnl_rms_lsb": 0.15, "missing_codes": [300, 611]}
    board = make_board(adc_bits=BITS, seed=23, converter=spec)
    s = bench_of(board)
    # overdriven sine, four records of 10^6 samples (the simulator's longest); 403.66 samples a
    # cycle, so the phases fill the cycle (a whole number of samples per cycle would not)
    codes = np.concatenate(
        [
            capture_codes(s, frequency=1.23865685e6, amplitude_V=0.52, points=1_000_000)
            for _ in range(4)
        ]
    )
    result = code_density(codes, BITS)
    assert result.missing_codes == (300, 611)
    truth = code_widths(ConverterSpec(**{**spec, "missing_codes": (300, 611)}), BITS, 23) - 1
    inner = slice(result.first_code - 1, result.first_code - 1 + result.dnl_lsb.size)
    # ~ 4e6/(π·532) ≈ 2400 counts per code: σ(DNL) ≈ 0.02; noise 0.2 LSB smooths the pattern a little
    assert np.abs(result.dnl_lsb - truth[inner]).max() < 0.12
    assert np.corrcoef(result.dnl_lsb, truth[inner])[0, 1] > 0.95


def test_bandwidth_attenuates_by_one_over_root_two_at_the_corner(bench_of):
    s = bench_of(make_board(adc_bits=12, converter={"bandwidth_mhz": 50.0, "noise_lsb": 0.3}))
    low = capture_codes(s, frequency=1e6, amplitude_V=0.4, bits=12).astype(float)
    corner = capture_codes(s, frequency=50e6, amplitude_V=0.4, bits=12).astype(float)
    low, corner = fit_sine_4(low, FS, 1e6), fit_sine_4(corner, FS, 50e6)
    ratio = corner.amplitude / low.amplitude
    # |H(f)| = 1/√(1 + (f/fc)²): at fc 1/√2, at fc/50 1/√(1 + 1/2500)
    assert ratio == pytest.approx(math.sqrt((1 + (1 / 50) ** 2) / 2), rel=0.005)


def test_averaging_a_sine_is_refused(bench_of):
    s = bench_of(make_board())
    s.pulser.write("SOUR:FUNC:SHAP SIN;:OUTP:STAT ON")
    assert s.pulser.query("*OPC?") == "1"
    s.scope.write("SENS:AVER:COUN 4;:INIT")
    assert s.scope.query("SYST:ERR?").startswith("-221")
