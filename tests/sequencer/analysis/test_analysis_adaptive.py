"""The adaptive S-curve planner (sequencer/analysis/adaptive.py) against outside references.

* The design points: maximising the determinant of the probit model's Fisher information over a
  symmetric two-point design, and the information on σ per pulse, numerically with scipy.optimize
  (the model ε = norm.sf(x, μ, σ) of REFERENCES.md "Threshold scans").
* Binomial counts drawn with numpy at known μ and σ: the planner recovers them within 3 standard
  uncertainties (k = 3, common practice) and reaches the uncertainty of a 29-point, 500-pulse grid
  with under half its gates (the issue's goal).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from sequencer.analysis import fit_s_curve
from sequencer.analysis.adaptive import (
    D_OPTIMAL_Z,
    SIGMA_OPTIMAL_Z,
    AdaptiveSCurve,
    ScanTargets,
)


def _info_per_pulse(z: float) -> tuple[float, float, float]:
    """Fisher information of one pulse at z = (x - μ)/σ, for (μ, σ) in units of σ: φ²/(ε(1-ε))
    times (1, z, z²) (the model's derivative in μ is -φ/σ, in σ is -zφ/σ)."""
    phi, eps = stats.norm.pdf(z), stats.norm.sf(z)
    w = phi**2 / (eps * (1 - eps))
    return w, w * z, w * z * z


def test_the_d_optimal_design_is_plus_minus_1_1381_sigma():
    def minus_det(z: float) -> float:
        # half the pulses at +z, half at -z: the cross terms cancel
        a, _, c = _info_per_pulse(z)
        return -(a * c)

    best = optimize.minimize_scalar(minus_det, bounds=(0.1, 4.0), method="bounded")
    assert best.x == pytest.approx(D_OPTIMAL_Z, abs=1e-3)


def test_a_pulse_tells_most_about_sigma_at_1_5750_sigma():
    best = optimize.minimize_scalar(
        lambda z: -_info_per_pulse(z)[2], bounds=(0.1, 4.0), method="bounded"
    )
    assert best.x == pytest.approx(SIGMA_OPTIMAL_Z, abs=1e-3)


def _scan(rng, mu, sigma, targets, *, centre=30.0, window=7.0, trials=500):
    plan = AdaptiveSCurve(centre_mV=centre, window_mV=window, trials=trials, targets=targets)
    while (x := plan.next_threshold()) is not None:
        plan.add(x, int(rng.binomial(trials, stats.norm.sf(x, mu, sigma))))
    return plan


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_the_grids_uncertainty_in_under_half_its_gates(seed):
    rng = np.random.default_rng(seed)
    mu, sigma = 31.2, 0.35
    grid = np.linspace(23.0, 37.0, 29)
    fixed = fit_s_curve(grid, rng.binomial(500, stats.norm.sf(grid, mu, sigma)), 500)
    plan = _scan(rng, mu, sigma, ScanTargets(mu_mV=fixed.mu_err, sigma_mV=fixed.sigma_err))
    assert plan.stopped == "target uncertainty reached" and plan.reached
    assert plan.gates <= 29 / 2
    fit = plan.fit
    assert abs(fit.mu - mu) <= 3 * fit.mu_err and abs(fit.sigma - sigma) <= 3 * fit.sigma_err


def test_a_transition_outside_the_window_is_found_by_moving_out():
    plan = _scan(np.random.default_rng(7), 41.0, 0.3, ScanTargets(mu_mV=0.02, sigma_mV=0.02))
    assert plan.reached and plan.fit.mu == pytest.approx(41.0, abs=0.1)
    assert max(plan.x) > 37.0  # beyond centre + window


def test_nothing_firing_anywhere_stops_with_the_reason():
    plan = AdaptiveSCurve(centre_mV=30.0, window_mV=7.0, trials=500,
                          targets=ScanTargets(mu_mV=0.02, sigma_mV=0.02))  # fmt: skip
    while (x := plan.next_threshold()) is not None:
        plan.add(x, 0)
    assert plan.stopped == "no transition found within the scanned range"
    assert plan.gates == 5 + 4 and plan.fit is None


def test_more_counts_than_pulses_end_the_scan():
    plan = AdaptiveSCurve(centre_mV=30.0, window_mV=7.0, trials=500,
                          targets=ScanTargets(mu_mV=0.02, sigma_mV=0.02))  # fmt: skip
    plan.add(plan.next_threshold(), 612)
    assert plan.next_threshold() is None and "fires on noise" in plan.stopped


def test_the_budget_bounds_the_scan():
    plan = _scan(
        np.random.default_rng(3), 30.0, 0.3, ScanTargets(mu_mV=1e-4, sigma_mV=1e-4, max_gates=12)
    )
    assert plan.gates == 12 and plan.stopped == "gate budget spent" and not plan.reached


def test_bad_targets_are_refused():
    with pytest.raises(ValueError, match="above 0"):
        ScanTargets(mu_mV=0.0, sigma_mV=0.1)
    with pytest.raises(ValueError, match="coarse"):
        ScanTargets(mu_mV=0.1, sigma_mV=0.1, coarse=2)
