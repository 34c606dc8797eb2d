"""Pulse shapes, noise and discriminator statistics of the board model against REFERENCES.md and
reference libraries (numpy/scipy); the digitizer's direct averaging against a literal loop."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import norm

from drivers.sim.adc import digitize
from drivers.sim.physics import (
    band_limited_noise,
    fast_pulse,
    fast_rise_time,
    fast_time_constants,
    firing_probability,
    rice_rate_hz,
    shaped_pulse,
    shaper_response,
)

X = np.linspace(0.0, 40.0, 400_001)  # x = t/τ, step 1e-4


def crossing_width(x: np.ndarray, v: np.ndarray, low: float, high: float) -> float:
    top = v.max()
    i = int(np.argmax(v))
    rise = np.interp([low * top, high * top], v[: i + 1], x[: i + 1])
    return float(rise[1] - rise[0])


# REFERENCES.md "Shaping amplifiers" (Spieler 2005 ch. 4): peak value n^n e^-n / n!, 10-90 % rise, FWHM
@pytest.mark.parametrize(
    "n,peak_value,rise,fwhm",
    [
        (1, 0.367879, 0.5701, 2.4464),
        (2, 0.270671, 1.1533, 3.3947),
        (3, 0.224042, 1.6411, 4.1312),
        (4, 0.195367, 2.0653, 4.7551),
    ],
)
def test_unipolar_shape_matches_the_tables(n, peak_value, rise, fwhm):
    v = shaper_response(X, n, "unipolar")
    assert X[np.argmax(v)] == pytest.approx(n, abs=2e-4)  # peaking time n·τ
    assert v.max() == pytest.approx(peak_value, abs=1e-6)
    assert crossing_width(X, v, 0.1, 0.9) == pytest.approx(rise, abs=2e-4)
    above = X[v >= v.max() / 2]
    assert above[-1] - above[0] == pytest.approx(fwhm, abs=2e-4)
    assert shaped_pulse(X * 10.0, n, 10.0, "unipolar").max() == pytest.approx(1.0, abs=1e-9)


# REFERENCES.md bipolar CR²-RCⁿ: zero crossing (n+1)τ, positive peak (n+1-√(n+1))τ, values, lobe ratio
@pytest.mark.parametrize(
    "n,pos_value,lobe",
    [
        (1, 0.230579, 0.344494),
        (2, 0.130602, 0.435968),
        (3, 0.090224, 0.494522),
        (4, 0.068557, 0.536633),
    ],
)
def test_bipolar_shape_matches_the_tables(n, pos_value, lobe):
    v = shaper_response(X, n, "bipolar")
    assert X[np.argmax(v)] == pytest.approx(n + 1 - math.sqrt(n + 1), abs=2e-4)
    assert X[np.argmin(v)] == pytest.approx(n + 1 + math.sqrt(n + 1), abs=2e-4)
    assert v.max() == pytest.approx(pos_value, abs=1e-6)
    assert -v.min() / v.max() == pytest.approx(lobe, abs=1e-6)
    positive = X[(v > 0) & (X > 0)]
    assert positive[-1] == pytest.approx(n + 1, abs=2e-4)
    assert np.trapezoid(v, X) == pytest.approx(0.0, abs=1e-6)  # net area 0


def test_fast_pulse_rise_is_solved_exactly():
    for rise, decay in [(4.0, 40.0), (1.0, 100.0), (10.0, 30.0)]:
        tau_r, tau_d = fast_time_constants(rise, decay)
        t = np.linspace(0, 5 * decay, 500_001)
        p = fast_pulse(t, tau_r, tau_d)
        assert p.max() == pytest.approx(1.0, abs=1e-7)  # sampled on a 0.0004-0.0006 ns grid
        assert crossing_width(t, p, 0.1, 0.9) == pytest.approx(rise, rel=1e-4)  # IEEE 181 10-90 %
        assert fast_rise_time(tau_r, tau_d) == pytest.approx(rise, rel=1e-9)
    # when decay >> rise the edge is a single pole: 10-90 % = ln 9 · τ (REFERENCES.md)
    tau_r, _ = fast_time_constants(2.0, 1e5)
    assert 2.0 / tau_r == pytest.approx(math.log(9), rel=1e-3)
    with pytest.raises(ValueError):
        fast_time_constants(30.0, 30.0)


def test_band_limited_noise_rms_and_correlation():
    rng = np.random.default_rng(1)
    tau, dt = 2.7, 1.0
    w = band_limited_noise(rng, 4, 200_000, dt, tau)
    assert np.std(w, axis=1) == pytest.approx(np.ones(4), rel=0.02)
    # one-pole low-pass sampled at dt: lag-1 autocorrelation exp(-dt/τ) (standard AR(1) result)
    lag1 = np.mean(w[:, 1:] * w[:, :-1]) / np.mean(w * w)
    assert lag1 == pytest.approx(math.exp(-dt / tau), abs=0.01)
    # the very first sample is already stationary (no start-up transient)
    starts = band_limited_noise(np.random.default_rng(2), 20_000, 3, dt, tau)[:, 0]
    assert np.std(starts) == pytest.approx(1.0, rel=0.03)


def test_firing_probability_is_the_normal_survival_function():
    # REFERENCES.md: ε(thr) = norm.sf(thr, μ, σ); ε(μ+σ) = 0.15865525393145707
    assert firing_probability(10.0, 10.5, 0.5) == pytest.approx(0.15865525393145707, rel=1e-12)
    for thr in (8.0, 9.7, 10.0, 12.0):
        assert firing_probability(10.0, thr, 0.7) == pytest.approx(
            norm.sf(thr, 10.0, 0.7), rel=1e-10
        )


def test_rice_rate():
    tau = 5.0
    nu0 = math.sqrt(3) / (2 * math.pi * tau * 1e-9)  # REFERENCES.md, CR-RC² (Rice 1944)
    assert rice_rate_hz(0.0, 1.0, tau) == pytest.approx(nu0)
    assert rice_rate_hz(2.0, 1.0, tau) == pytest.approx(nu0 * math.exp(-2.0))


@pytest.mark.parametrize("s", [0.3, 0.5, 1.5])
def test_direct_average_matches_a_literal_loop(s):
    """Average of N quantised acquisitions, computed directly vs. by looping N times."""
    n, points, bits = 64, 4000, 12
    u = np.linspace(-3.0, 3.0, points)  # signal in ADC steps (q = 1)
    rng = np.random.default_rng(11)
    loop = np.mean([np.rint(u + s * rng.standard_normal(points)) for _ in range(n)], axis=0)
    white = np.random.default_rng(12).standard_normal((1, points))
    direct = (
        digitize(
            u[None, :],
            white,
            np.array([s]),
            averages=n,
            full_scale_V=np.array([2.0**bits]),
            offset_V=np.array([0.0]),
            bits=bits,
            rng=np.random.default_rng(13),
        )[0]
        / 16.0
    )
    # the same systematic response (quantiser staircase smoothed by the noise) ...
    window = 200
    smooth = np.ones(window) / window
    assert (
        np.max(np.abs(np.convolve(direct - loop, smooth, "valid")))
        < 4 * s / math.sqrt(n * window) + 0.01
    )
    # ... and the same noise of the average
    assert np.std(direct - u) == pytest.approx(np.std(loop - u), rel=0.12)


def test_average_without_dither_stays_quantised():
    u = np.full((1, 1000), 0.3)  # 0.3 steps, noise 0.02 steps: every acquisition reads 0
    codes = digitize(
        u,
        np.zeros_like(u),
        np.array([0.02]),
        averages=256,
        full_scale_V=np.array([4096.0]),
        offset_V=np.array([0.0]),
        bits=12,
        rng=np.random.default_rng(0),
    )
    assert np.all(codes == 0)
