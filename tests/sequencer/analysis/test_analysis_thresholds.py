"""threshold_calibration, noise_rate and rice_nu0."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, signal, stats

from sequencer.analysis import fit_s_curve, noise_rate, rice_nu0, threshold_calibration


def test_rice_nu0_reference_values() -> None:
    # REFERENCES.md (S. O. Rice, BSTJ 1944/45): CR-RC² ν₀ = √3/(2πτ), CR-RC⁴ ν₀ = √(3/5)/(2πτ)
    tau_ns = 50.0
    assert rice_nu0(tau_ns, 2) == pytest.approx(math.sqrt(3) / (2 * math.pi * 50e-9), rel=1e-12)
    assert rice_nu0(tau_ns, 4) == pytest.approx(math.sqrt(3 / 5) / (2 * math.pi * 50e-9), rel=1e-12)


def test_rice_nu0_order_3_by_quadrature() -> None:
    # scipy.integrate.quad reference: ν₀ = (1/2π)√(∫ω²|H|² / ∫|H|²), |H|² = (ωτ)²/(1+(ωτ)²)^(n+1)
    # with x = ωτ: ν₀ = √(∫x²P / ∫P) / (2πτ), P(x) = x²/(1+x²)^4
    power = lambda x: x * x / (1 + x * x) ** 4  # noqa: E731
    m0 = integrate.quad(power, 0, np.inf)[0]
    m2 = integrate.quad(lambda x: x * x * power(x), 0, np.inf)[0]
    tau_s = 1e-6
    expected = math.sqrt(m2 / m0) / (2 * math.pi * tau_s)
    assert rice_nu0(1000.0, 3) == pytest.approx(expected, rel=1e-8)


@pytest.mark.parametrize(("order", "tau_samples"), [(2, 100.0), (4, 50.0)])
def test_noise_rate_matches_simulated_crossings(order: int, tau_samples: float) -> None:
    # Monte Carlo check of Rice's formula: white noise through a CR-RCⁿ filter (bilinear transform
    # of H(s) = sτ/(1+sτ)^(n+1), scipy.signal), upward crossings counted at 0, 1 and 2 σ.
    # Tolerance 5 % / 8 %: counting statistics (1-3 %) plus the bandwidth lost to sampling.
    rng = np.random.default_rng(8)
    b = [tau_samples, 0.0]
    a = (np.poly1d([tau_samples, 1.0]) ** (order + 1)).coeffs
    bz, az = signal.bilinear(b, a, fs=1.0)
    y = signal.lfilter(bz, az, rng.standard_normal(4_000_000))[5000:]
    sigma = float(np.std(y))
    nu0 = rice_nu0(tau_samples, order)  # dt = 1 ns per sample
    for level, tol in ((0.0, 0.05), (1.0, 0.05), (2.0, 0.08)):
        u = level * sigma
        crossings = np.count_nonzero((y[:-1] < u) & (y[1:] >= u))
        measured_hz = crossings / ((y.size - 1) * 1e-9)
        assert measured_hz == pytest.approx(noise_rate(u, sigma, nu0), rel=tol)


def test_noise_rate_formula_and_vectorisation() -> None:
    # Rice: ν(u) = ν₀ exp(-u²/2σ²); at u = σ the rate is ν₀ e^(-1/2)
    assert noise_rate(2.0, 2.0, 1e6) == pytest.approx(1e6 * math.exp(-0.5), rel=1e-14)
    rates = noise_rate([0.0, 1.0, 3.0], 1.0, 1e5)
    np.testing.assert_allclose(rates, 1e5 * np.exp(-0.5 * np.array([0.0, 1.0, 9.0])))
    with pytest.raises(ValueError, match="sigma_mV"):
        noise_rate(1.0, 0.0, 1e5)


def test_rice_nu0_rejects_order_1() -> None:
    with pytest.raises(ValueError, match="order must be an integer >= 2"):
        rice_nu0(50.0, 1)
    with pytest.raises(ValueError, match="tau_ns"):
        rice_nu0(-1.0, 2)


def test_threshold_calibration_recovers_discriminator_offset() -> None:
    # DESIGN.md simulator physics: the discriminator fires when the pulse height plus noise
    # exceeds threshold - offset, so ε(thr) = norm.sf(thr, height + offset, σ): μ = height + offset.
    rng = np.random.default_rng(21)
    offset, sigma, trials = 1.5, 0.8, 400
    heights = np.array([10.0, 25.0, 50.0, 100.0, 200.0])
    mus, errs = [], []
    for h in heights:
        thr = np.linspace(h + offset - 4, h + offset + 4, 33)
        fit = fit_s_curve(thr, rng.binomial(trials, stats.norm.sf(thr, h + offset, sigma)), trials)
        mus.append(fit.mu)
        errs.append(fit.mu_err)
    cal = threshold_calibration(heights, mus, errs)
    assert abs(cal.offset_mV - offset) < 3 * cal.offset_err
    assert abs(cal.slope - 1.0) < 3 * cal.slope_err
    assert cal.offset_err == pytest.approx(cal.fit.intercept_err)
    assert cal.chi2_ndf < 5.0
    unweighted = threshold_calibration(heights, mus)
    assert abs(unweighted.offset_mV - offset) < 0.2
