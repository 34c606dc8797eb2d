"""Coincidence analysis against outside references: R_acc = 2τR₁R₂ (REFERENCES.md "accidental
coincidences", standard; Leo, from memory), a delay curve built from scipy.special.erf (a rectangle of
half-width τ convolved with Gaussian jitter), the binomial efficiency (Ullrich & Xu 2003)."""

import math

import numpy as np
import pytest
from scipy.special import erf

from sequencer.analysis import (
    accidental_rate_hz,
    coincidence_efficiency,
    fit_delay_curve,
)


def test_accidental_rate_reference_value():
    # REFERENCES.md: τ = 50 ns, R₁ = 1 kHz, R₂ = 2 kHz -> 0.2 Hz (standard, Leo from memory)
    assert accidental_rate_hz(50.0, 1e3, 2e3) == pytest.approx(0.2, rel=1e-12)


def test_accidental_rate_against_two_independent_poisson_trains():
    # Two independent Poisson trains, counted with a brute-force pair search (every |t2 - t1| of
    # every pair, numpy.subtract.outer) over 100 gates, agree with 2τR₁R₂ within 4 Poisson σ
    # (the first-order formula is high by 2τR₂ = 0.4 %, far inside that).
    rng = np.random.default_rng(181)
    tau_s, r1, r2, gate, gates = 50e-9, 20e3, 40e3, 0.05, 100
    found = 0
    for _ in range(gates):
        t1 = rng.uniform(0, gate, rng.poisson(r1 * gate))
        t2 = rng.uniform(0, gate, rng.poisson(r2 * gate))
        found += int((np.abs(np.subtract.outer(t1, t2)) < tau_s).any(axis=1).sum())
    expected = accidental_rate_hz(50.0, r1, r2) * gate * gates
    assert expected == pytest.approx(400.0)
    assert abs(found - expected) < 4 * math.sqrt(expected)


def test_accidental_rate_refuses_bad_inputs():
    with pytest.raises(ValueError, match="resolving_time_ns"):
        accidental_rate_hz(0.0, 1e3, 1e3)
    with pytest.raises(ValueError, match="rate2_hz"):
        accidental_rate_hz(50.0, 1e3, float("nan"))


def box_with_jitter(d, centre, tau, sigma, plateau, background):
    """Rectangle |d - centre| < τ convolved with a Gaussian of σ (erf form), plus a floor."""
    s = math.sqrt(2.0) * sigma
    return background + 0.5 * plateau * (erf((d - centre + tau) / s) - erf((d - centre - tau) / s))


@pytest.mark.parametrize("tau,sigma,centre", [(25.0, 1.0, 0.0), (35.0, 3.0, 7.5), (10.0, 0.5, -4)])
def test_delay_curve_resolving_time_is_half_the_fwhm(tau, sigma, centre):
    d = np.arange(-80.0, 80.1, 2.0)
    r = box_with_jitter(d, centre, tau, sigma, 1e4, 3.0)
    curve = fit_delay_curve(d, r)
    # half-maximum of a box ⊗ Gaussian sits at ±τ (symmetry of erf) while σ << τ
    assert curve.resolving_time_ns == pytest.approx(tau, abs=0.05 * sigma + 0.02)
    assert curve.fwhm_ns == pytest.approx(2 * curve.resolving_time_ns)
    assert curve.centre_ns == pytest.approx(centre, abs=0.05)
    assert curve.plateau_hz == pytest.approx(1e4 + 3.0, rel=1e-3)
    assert curve.background_hz == pytest.approx(3.0, abs=1e-6)


def test_delay_curve_with_poisson_counts_keeps_tau_within_the_step():
    rng = np.random.default_rng(5)
    d = np.arange(-60.0, 60.1, 2.0)
    gate = 0.5
    counts = rng.poisson(box_with_jitter(d, 0.0, 20.0, 1.0, 1e4, 0.0) * gate)
    curve = fit_delay_curve(d, counts / gate)
    assert curve.resolving_time_ns == pytest.approx(20.0, abs=0.5)
    assert curve.plateau_hz == pytest.approx(1e4, abs=5 * curve.plateau_uncertainty_hz)
    assert curve.plateau_points >= 5


def test_delay_curve_refuses_a_scan_that_does_not_show_both_edges():
    d = np.arange(-20.0, 60.1, 2.0)
    with pytest.raises(ValueError, match="earlier delays"):
        fit_delay_curve(d, box_with_jitter(d, 0.0, 25.0, 1.0, 1e4, 0.0))
    with pytest.raises(ValueError, match="no peak"):
        fit_delay_curve(d, np.full(d.size, 5.0))
    with pytest.raises(ValueError, match="repeated"):
        fit_delay_curve([0, 0, 1, 2, 3], [0, 1, 2, 1, 0])
    with pytest.raises(ValueError, match="at least 5"):
        fit_delay_curve([0, 1, 2], [0, 1, 0])


def test_efficiency_binomial_uncertainty():
    # σ = √(ε(1-ε)/N), Ullrich & Xu 2003 (REFERENCES.md "fit weights")
    e = coincidence_efficiency(900, 1000)
    assert e.value == pytest.approx(0.9)
    assert e.uncertainty == pytest.approx(math.sqrt(0.9 * 0.1 / 1000))
    full = coincidence_efficiency(1000, 1000)  # (k+1)/(N+2) keeps a non-zero uncertainty
    assert full.value == 1.0 and 0 < full.uncertainty < 0.002
    with pytest.raises(ValueError):
        coincidence_efficiency(11, 10)
