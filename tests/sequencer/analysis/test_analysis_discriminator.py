"""Discriminator timing against outside references: σ_t ≈ σ_noise/(dV/dt) on synthetic edges
(REFERENCES.md "timing jitter": 1 mV / (10 mV/ns) = 0.1 ns, standard); leading-edge walk of a linear
edge t = t_r·thr/A and the constant-fraction time d/(1 − f) independent of amplitude (geometry of
the linear edge; Knoll ch. 17 for the technique, from memory); the RMS uncertainty σ/√(2(N−1))
(standard large-N result for a Gaussian sample)."""

import math

import numpy as np
import pytest
from scipy.signal import lfilter

from sequencer.analysis import (
    constant_fraction_times,
    expected_jitter_ns,
    leading_edge_times,
    time_walk,
    timing_jitter,
)

DT = 0.05  # ns
T = np.arange(0, 60, DT)


def edge(amplitude: float, rise_ns: float, start_ns: float = 10.0) -> np.ndarray:
    """A linear rise from start to start + rise, then flat (mV)."""
    return amplitude * np.clip((T - start_ns) / rise_ns, 0.0, 1.0)


def test_reference_jitter_value():
    assert expected_jitter_ns(1.0, 10.0) == pytest.approx(0.1)  # REFERENCES.md


def test_jitter_of_noisy_edges_matches_noise_over_slope():
    rng = np.random.default_rng(181)
    slope = 10.0  # mV/ns: 200 mV over 20 ns
    clean = edge(200.0, 20.0)
    # noise as an amplifier leaves it: white noise through a one-pole low-pass of 2 ns (40 samples),
    # scaled to 1 mV RMS, so it is the same on both samples around the crossing (the estimate's
    # premise; sample-to-sample independent noise would be averaged by the interpolation)
    a = math.exp(-DT / 2.0)
    noise = lfilter([1 - a], [1, -a], rng.normal(0, 1.0, (2000, T.size + 400)), axis=1)[:, 400:]
    noise /= noise.std()
    times = leading_edge_times(clean + noise, DT, 100.0)
    j = timing_jitter(times)
    assert j.rms_ns == pytest.approx(expected_jitter_ns(1.0, slope), rel=0.1)
    assert j.mean_ns == pytest.approx(20.0, abs=0.01)  # 10 ns + 100/200 × 20 ns
    assert j.uncertainty_ns == pytest.approx(j.rms_ns / math.sqrt(2 * 1999))
    assert j.n == 2000 and j.refused == 0


def test_leading_edge_walks_and_constant_fraction_does_not():
    amplitudes = np.array([50.0, 100.0, 200.0, 400.0])
    rows = np.array([edge(a, 8.0) for a in amplitudes])
    le = leading_edge_times(rows, DT, 20.0)
    # linear edge: t = start + t_r·thr/A
    assert le == pytest.approx(10.0 + 8.0 * 20.0 / amplitudes, abs=1e-6)
    walk = time_walk(amplitudes, le)
    assert walk.walk_ns == pytest.approx(8.0 * 20.0 * (1 / 50 - 1 / 400), abs=1e-6)
    cf = constant_fraction_times(rows, DT, fraction=0.3, delay_ns=2.0, arming_mV=5.0)
    # f·A(t − s)/t_r = A(t − s − d)/t_r  ->  t = s + d/(1 − f), for every A
    assert cf == pytest.approx(10.0 + 2.0 / 0.7, abs=1e-6)
    assert time_walk(amplitudes, cf).walk_ns < 1e-6


def test_refusals_and_missing_crossings():
    rows = np.array([edge(50.0, 8.0), edge(10.0, 8.0)])  # the second never reaches 20 mV
    times = leading_edge_times(rows, DT, 20.0)
    assert math.isfinite(times[0]) and math.isnan(times[1])
    with pytest.raises(ValueError, match="at least 2"):
        timing_jitter(times)
    with pytest.raises(ValueError, match="no crossing at amplitude"):
        time_walk([50.0, 10.0], times)
    with pytest.raises(ValueError, match="fraction"):
        constant_fraction_times(rows, DT, fraction=1.5, delay_ns=2.0, arming_mV=5.0)
