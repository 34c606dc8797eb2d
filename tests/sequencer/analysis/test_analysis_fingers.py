"""Finger-spectrum fit and the zero-peak estimate of μ, against scipy.stats.poisson and synthetic
spectra with known gain and μ."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sensor_spectra import finger_amplitudes

from sequencer.analysis import (
    crosstalk_lambda,
    crosstalk_probability,
    fit_finger_spectrum,
    generalised_poisson_pmf,
    mean_photoelectrons,
)

GAIN, MU = 10.0, 1.2


def test_zero_peak_mu_reference_value() -> None:
    # REFERENCES.md (Poisson statistics): N₀/N = 0.3 → μ = 1.2039728
    assert mean_photoelectrons(300, 1000).mu == pytest.approx(1.2039728, abs=1e-7)


@pytest.mark.parametrize("mu", [0.3, 1.2039728, 2.5])
def test_zero_peak_inverts_scipy_poisson(mu: float) -> None:
    # scipy.stats.poisson.pmf(0, μ) = e^-μ: the estimate inverts it exactly
    n = 1_000_000
    n0 = stats.poisson.pmf(0, mu) * n
    assert mean_photoelectrons(n0, n).mu == pytest.approx(mu, rel=1e-12)


def test_zero_peak_error_is_binomial_and_covers() -> None:
    # Binomial N₀ (standard): σ_μ = √((1-p₀)/(N p₀)); check it against the spread of scipy draws
    rng = np.random.default_rng(11)
    n, mu = 2000, 1.0
    p0 = stats.poisson.pmf(0, mu)
    draws = stats.binom.rvs(n, p0, size=4000, random_state=rng)
    estimates = np.array([mean_photoelectrons(k, n).mu for k in draws])
    predicted = mean_photoelectrons(p0 * n, n).mu_err
    assert predicted == pytest.approx(np.sqrt((1 - p0) / (n * p0)), rel=1e-12)
    assert np.std(estimates) == pytest.approx(predicted, rel=0.05)


@pytest.mark.parametrize("n0, n", [(0, 100), (100, 100), (101, 100), (5, 0)])
def test_zero_peak_refuses_what_it_cannot_measure(n0: float, n: float) -> None:
    with pytest.raises(ValueError):
        mean_photoelectrons(n0, n)


def test_branching_parameter_reference_value() -> None:
    # REFERENCES.md, Vinogradov arXiv:1109.2014: P_ct = 0.1 ↔ λ = 0.1053605
    assert crosstalk_lambda(0.1) == pytest.approx(0.1053605, abs=1e-7)
    assert crosstalk_probability(0.1053605) == pytest.approx(0.1, abs=1e-7)


def test_generalised_poisson_against_scipy_poisson() -> None:
    k = np.arange(40)
    # λ = 0 is Poisson (scipy.stats.poisson); P(0) = e^-μ whatever λ (the zero-peak method's basis)
    assert generalised_poisson_pmf(k, 1.7, 0.0) == pytest.approx(stats.poisson.pmf(k, 1.7))
    p = generalised_poisson_pmf(np.arange(400), 1.7, 0.2)
    assert p[0] == pytest.approx(stats.poisson.pmf(0, 1.7), rel=1e-12)
    assert p.sum() == pytest.approx(1.0, abs=1e-9)
    # mean μ/(1-λ) (Consul, Generalized Poisson Distributions, 1989, from memory)
    assert p @ np.arange(400) == pytest.approx(1.7 / 0.8, rel=1e-9)


def test_generalised_poisson_matches_branching_draws() -> None:
    from sensor_spectra import fired_cells

    cells = fired_cells(np.random.default_rng(5), 200_000, 1.0, 0.15)
    observed = np.bincount(cells, minlength=8)[:8] / cells.size
    assert observed == pytest.approx(generalised_poisson_pmf(np.arange(8), 1.0, 0.15), abs=3e-3)


def test_fit_recovers_gain_and_mu_within_uncertainty_in_most_trials() -> None:
    # Issue 17: a synthetic spectrum with known gain and μ is recovered within its one-sigma
    # uncertainty in ≥ 68 % of 200 seeded trials (crosstalk λ = 0.1 included; measured over 600
    # further seeds the coverage is 68.5 % (gain) and 67 % (μ), i.e. the errors are honest).
    gain_hits = mu_hits = 0
    for seed in range(200):
        fit = fit_finger_spectrum(finger_amplitudes(np.random.default_rng(seed)))
        gain_hits += abs(fit.gain - GAIN) < fit.gain_err
        mu_hits += abs(fit.mu - MU) < fit.mu_err
    assert gain_hits >= 136 and mu_hits >= 136


def test_fit_errors_are_not_inflated() -> None:
    # a one-sigma error that covered everything would be useless: the 2σ band holds ~95 %, the
    # 0.5σ band about 38 % (normal distribution)
    pulls = []
    for seed in range(300, 360):
        fit = fit_finger_spectrum(finger_amplitudes(np.random.default_rng(seed)))
        pulls.append((fit.gain - GAIN) / fit.gain_err)
    pulls = np.abs(np.array(pulls))
    assert 0.2 < np.mean(pulls < 0.5) < 0.6
    assert np.mean(pulls < 2.0) > 0.85


def test_fit_with_negative_pedestal_and_other_gain() -> None:
    amp = finger_amplitudes(
        np.random.default_rng(3), n=5000, mu=2.0, gain=4.2, pedestal=-7.0, sigma0=0.5, sigma1=0.3
    )
    fit = fit_finger_spectrum(amp)
    assert abs(fit.gain - 4.2) < 4 * fit.gain_err
    assert abs(fit.pedestal + 7.0) < 4 * fit.pedestal_err
    assert fit.model.sum() == pytest.approx(amp.size, rel=0.02)


def test_fit_refuses_unresolved_peaks() -> None:
    amp = finger_amplitudes(np.random.default_rng(4), sigma0=8.0, sigma1=2.0)
    with pytest.raises(ValueError, match=r"resolved|peak"):
        fit_finger_spectrum(amp, gain_guess=10.0)


def test_fit_refuses_non_finite_amplitudes() -> None:
    amp = finger_amplitudes(np.random.default_rng(4))
    amp[7] = np.nan
    with pytest.raises(ValueError, match="non-finite"):
        fit_finger_spectrum(amp)
