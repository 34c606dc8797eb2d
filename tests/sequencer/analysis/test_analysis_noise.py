"""enc_electrons and average_traces."""

from __future__ import annotations

import numpy as np
import pytest

from sequencer.analysis import ELEMENTARY_CHARGE_C, average_traces, baseline_rms, enc_electrons


def test_enc_reference_value() -> None:
    # REFERENCES.md (SI definition, q_e = 1.602176634e-19 C): 2 mV at 10 mV/fC = 1248.3018 e⁻
    assert ELEMENTARY_CHARGE_C == 1.602176634e-19  # exact SI value since 2019
    assert enc_electrons(2.0, 10.0) == pytest.approx(1248.3018, abs=5e-5)
    np.testing.assert_allclose(enc_electrons([2.0, 4.0], 10.0), [1248.3018, 2496.6036], atol=1e-4)


def test_enc_rejects_bad_values() -> None:
    with pytest.raises(ValueError, match="gain_mV_per_fC"):
        enc_electrons(1.0, 0.0)
    with pytest.raises(ValueError, match="noise_mV"):
        enc_electrons(-1.0, 10.0)
    with pytest.raises(ValueError, match="noise_mV"):
        enc_electrons(np.nan, 10.0)


def test_averaging_white_noise_falls_as_one_over_sqrt_n() -> None:
    # REFERENCES.md: averaging N traces, white noise RMS falls as 1/√N
    rng = np.random.default_rng(12)
    sigma = 0.8
    for n in (4, 16, 64):
        traces = 1.0 + sigma * rng.standard_normal((n, 20_000))
        avg = average_traces(traces)
        assert avg.count == n
        # RMS of 20 000 samples: relative standard error 1/√(2·20000) ≈ 0.5 %; bound 3 %
        assert baseline_rms(avg.mean, 20_000) == pytest.approx(sigma / np.sqrt(n), rel=0.03)
        # std_err² is unbiased for σ²/N (ddof = 1); std_err itself runs low by c4(N)
        assert np.sqrt(np.mean(avg.std_err**2)) == pytest.approx(sigma / np.sqrt(n), rel=0.03)


def test_averaging_needs_two_traces() -> None:
    with pytest.raises(ValueError, match="at least 2"):
        average_traces(np.zeros(10))
    with pytest.raises(ValueError, match="NaN"):
        average_traces(np.array([[0.0, np.nan], [1.0, 2.0]]))
