"""Code-density (histogram) test against outside references: the 3-bit converter of REFERENCES.md
("Transfer-curve nonlinearity", IEEE Std 1241-2010, clause from memory) and a DNL pattern injected into
a synthetic converter read back through the ideal sine density p(V) = 1/(π√(A² − V²))."""

import numpy as np
import pytest

from sequencer.analysis import code_density, dnl_from_transitions


def test_three_bit_reference_converter():
    # REFERENCES.md: transitions 0.5, 1.5, 2.0, 3.5, 4.5, 5.4, 6.5 LSB -> DNL 0, −0.5, +0.5, 0, −0.1, +0.1
    dnl, inl = dnl_from_transitions([0.5, 1.5, 2.0, 3.5, 4.5, 5.4, 6.5])
    assert dnl == pytest.approx([0.0, -0.5, 0.5, 0.0, -0.1, 0.1], abs=1e-12)
    assert inl == pytest.approx([0.0, 0.0, -0.5, 0.0, 0.0, -0.1, 0.0], abs=1e-12)  # running sum


def converter(transitions: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Code k for inputs in [T[k], T[k+1]) (T[k] = transition into code k, k = 1 .. 2**bits - 1)."""
    return np.searchsorted(transitions, x, side="right").astype(np.int16)


def sine_record(amplitude: float, centre: float, n: int, seed: int) -> np.ndarray:
    # coherent sampling, an odd number of cycles in a power-of-two record: every phase k/n of the
    # cycle is sampled once, as the histogram test asks (IEEE 1241, from memory)
    rng = np.random.default_rng(seed)
    phase = 2 * np.pi * 1021 * np.arange(n) / n + rng.uniform(0, 2 * np.pi)
    return amplitude * np.sin(phase) + centre


def test_injected_dnl_pattern_and_missing_code_are_recovered():
    bits = 8
    rng = np.random.default_rng(1241)
    widths = 1.0 + rng.uniform(-0.3, 0.3, 2**bits - 2)  # codes 1 .. 254
    widths[100] = 0.0  # code 101 missing
    widths *= (2**bits - 2) / widths.sum()  # mean width exactly 1 LSB
    transitions = np.concatenate([[1.0], 1.0 + np.cumsum(widths)])  # T[1] .. T[255]
    true_dnl = widths - 1.0
    true_inl = np.concatenate([[0.0], np.cumsum(true_dnl)])
    x = sine_record(130.0, 128.0, 1 << 21, seed=5)  # overdrives both ends
    result = code_density(converter(transitions, x), bits)
    assert result.first_code == 1
    assert result.dnl_lsb.size == 254
    # counts per code >= 2e6/(π·130) ≈ 4900 -> σ(DNL) <= 1/√4900 ≈ 0.014; 4σ bound
    assert result.dnl_lsb == pytest.approx(true_dnl, abs=0.06)
    assert result.inl_lsb == pytest.approx(true_inl, abs=0.15)
    assert result.missing_codes == (101,)
    assert result.dnl_lsb[100] == pytest.approx(-1.0)
    assert result.dnl_max_lsb == pytest.approx(np.max(np.abs(true_dnl)), abs=0.06)


def test_ideal_converter_without_overdrive_has_flat_dnl():
    # The sine stays inside the range: only the transitions it crossed are measured.
    transitions = np.arange(1.0, 1024.0)
    x = sine_record(400.0, 512.3, 1 << 20, seed=9)
    result = code_density(converter(transitions, x), 10)
    assert result.first_code == int(np.floor(512.3 - 400.0)) + 1
    assert result.dnl_max_lsb < 0.12  # ≥ 800 counts per code: σ ≈ 0.035
    assert result.missing_codes == ()
    assert result.counts.sum() == 1 << 20


def test_refusals():
    with pytest.raises(ValueError, match=r"0\.\.255"):
        code_density(np.array([0, 5, 256]), 8)
    with pytest.raises(ValueError, match="integers"):
        code_density(np.array([0.0, 1.0]), 8)
    with pytest.raises(ValueError, match="inner codes"):
        code_density(np.array([3, 4, 5, 4]), 8)
    with pytest.raises(ValueError, match="decrease"):
        dnl_from_transitions([1.0, 3.0, 2.0])
