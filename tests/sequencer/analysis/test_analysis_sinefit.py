"""Sine fits, SINAD and ENOB against outside references: REFERENCES.md "Digitizers" (IEEE Std 1241 /
IEEE Std 1057, clause numbers from memory; the ideal-quantiser SINAD 6.0206N + 1.7609 dB), and
scipy.optimize.least_squares fitting the same model to the same record."""

import math

import numpy as np
import pytest
from scipy.optimize import least_squares

from sequencer.analysis import enob, estimate_frequency, fit_sine_3, fit_sine_4, sinad_db


def ideal_quantiser(x: np.ndarray, bits: int) -> np.ndarray:
    """Transitions at the integers 1 .. 2**bits - 1 (code k spans [k, k+1)), clipped to the range."""
    return np.clip(np.floor(x), 0, 2**bits - 1)


def test_reference_eight_bit_record():
    # REFERENCES.md: 8-bit sine of amplitude 2⁷ − 0.5 codes, 65,536 samples, 1,021 cycles,
    # three-parameter fit at the known frequency -> SINAD 49.7786 dB, ENOB 7.9756 (numerical).
    n = np.arange(65_536)
    x = 127.5 * np.sin(2 * np.pi * 1021 * n / 65_536) + 127.5
    fit = fit_sine_3(ideal_quantiser(x, 8), 1021.0, 65_536.0)
    assert fit.sinad_db == pytest.approx(49.7786, abs=5e-5)
    assert fit.enob == pytest.approx(7.9756, abs=5e-5)
    assert fit.amplitude == pytest.approx(127.5, abs=0.05)  # quantisation shifts it slightly
    assert fit.offset == pytest.approx(127.5 - 0.5, abs=0.05)  # floor: half an LSB down


@pytest.mark.parametrize("bits", [8, 10, 12])
def test_ideal_n_bit_quantiser_enob_within_a_tenth_of_a_bit(bits):
    # REFERENCES.md: SINAD of an ideal N-bit quantiser with a full-scale sine 6.0206N + 1.7609 dB;
    # ENOB within 0.1 bit of N (issue 18).  Frequency not coherent with the record, four-parameter
    # fit started from the spectrum, a phase and an offset off the grid.
    fs, f, n = 100e6, 3.1234567e6, 1 << 15
    t = np.arange(n) / fs
    half = 2 ** (bits - 1)
    x = (half - 0.5) * np.sin(2 * np.pi * f * t + 0.7) + half - 0.23
    fit = fit_sine_4(ideal_quantiser(x, bits), fs)
    assert fit.converged
    assert fit.frequency_hz == pytest.approx(f, rel=1e-7)
    assert abs(fit.enob - bits) < 0.1
    assert fit.sinad_db == pytest.approx(6.0206 * bits + 1.7609, abs=0.6)


def test_four_parameter_fit_agrees_with_scipy_least_squares():
    # Reference implementation: scipy.optimize.least_squares on the same model and record.
    rng = np.random.default_rng(1057)
    fs, f, n = 250e6, 12.3456e6, 4096
    t = np.arange(n) / fs
    y = 410.0 * np.cos(2 * np.pi * f * t + 0.4) - 12.0 + rng.normal(0, 3.0, n)
    ours = fit_sine_4(y, fs, 12.34e6)

    def resid(p):
        return p[0] * np.cos(2 * np.pi * p[3] * 1e6 * t + p[1]) + p[2] - y

    ref = least_squares(resid, [400.0, 0.3, -10.0, 12.34], x_scale=[100, 1, 10, 1e-3], xtol=1e-15)
    amp, phase, offset, f_mhz = ref.x
    assert ours.amplitude == pytest.approx(amp, rel=1e-7)
    assert ours.phase_rad == pytest.approx(math.remainder(phase, 2 * math.pi), abs=1e-6)
    assert ours.offset == pytest.approx(offset, abs=1e-6)
    assert ours.frequency_hz == pytest.approx(f_mhz * 1e6, rel=1e-10)
    assert ours.residual_rms == pytest.approx(np.sqrt(np.mean(ref.fun**2)), rel=1e-8)


def test_three_parameter_fit_recovers_a_noiseless_sine_and_the_noise_gives_sinad():
    fs, f, n = 1e9, 37e6, 2000
    t = np.arange(n) / fs
    clean = 80.0 * np.cos(2 * np.pi * f * t - 1.1) + 5.0
    fit = fit_sine_3(clean, f, fs)
    assert (fit.amplitude, fit.phase_rad, fit.offset) == pytest.approx((80.0, -1.1, 5.0), abs=1e-9)
    assert fit.residual_rms < 1e-9
    noisy = clean + np.random.default_rng(2).normal(0, 0.8, n)
    # SINAD of white noise σ under a sine A: 20·log10(A/√2/σ) (IEEE 1241 definition)
    assert fit_sine_3(noisy, f, fs).sinad_db == pytest.approx(
        20 * math.log10(80 / math.sqrt(2) / 0.8), abs=0.2
    )


def test_enob_and_sinad_formulas():
    assert enob(6.0206 * 10 + 1.7609) == pytest.approx(10.0, abs=1e-4)  # REFERENCES.md
    assert sinad_db(1.0, 0.0) == math.inf
    with pytest.raises(ValueError):
        sinad_db(1.0, float("nan"))


def test_frequency_estimate_and_refusals():
    fs = 1e6
    t = np.arange(5000) / fs
    y = np.sin(2 * np.pi * 12_345.6 * t)
    assert estimate_frequency(y, fs) == pytest.approx(12_345.6, rel=2e-3)
    bad = y.copy()
    bad[10] = np.nan
    with pytest.raises(ValueError, match="non-finite"):
        fit_sine_4(bad, fs)
    with pytest.raises(ValueError, match="Nyquist"):
        fit_sine_3(y, 600e3, fs)
    with pytest.raises(ValueError, match="at least"):
        fit_sine_3(y[:5], 1e3, fs)
