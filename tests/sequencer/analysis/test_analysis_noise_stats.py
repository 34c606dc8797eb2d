"""The precision of an RMS from correlated samples (sequencer/analysis/noise_stats.py).

References: the chi distribution of a Gaussian sample's standard deviation (scipy.stats.chi, the
reference library: s·sqrt(ν)/σ is chi with ν degrees of freedom; GUM JCGM 100:2008 E.4.3 gives its
relative spread ≈ [2ν]^(-1/2)); Bartlett's variance of the sample variance of a stationary process,
whose one-pole case n_eff = n(1 − a²)/(1 + a²) is worked by hand from ρ_k = a^k:
1 + 2 Σ a^(2k) = (1 + a²)/(1 − a²).  Noise is drawn with scipy.signal.lfilter (the same one-pole
process as the simulator's band-limited noise) and checked by Monte Carlo.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import lfilter
from scipy.stats import chi

from sequencer.analysis.noise_stats import RmsToTarget, autocorrelation, rms_precision


def one_pole(rng: np.random.Generator, rows: int, n: int, a: float) -> np.ndarray:
    """Unit-variance noise with ρ_k = a^k (a white draw through a one-pole low-pass, started late
    enough that the start-up transient, a^200, is gone)."""
    w = rng.standard_normal((rows, n + 200))
    return lfilter([math.sqrt(1.0 - a * a)], [1.0, -a], w, axis=1)[:, 200:]


def test_white_noise_counts_every_sample_and_matches_the_chi_distribution():
    x = np.random.default_rng(5).standard_normal((1, 2000))
    p = rms_precision(x)
    assert p.effective == pytest.approx(2000, rel=0.02)
    nu = 1999
    exact = chi(nu).std() / chi(nu).mean()  # relative spread of s, exactly
    assert p.relative_uncertainty == pytest.approx(exact, rel=0.02)


@pytest.mark.parametrize("a", [0.5, 0.7, 0.9])
def test_one_pole_noise_counts_as_bartletts_effective_samples(a):
    x = one_pole(np.random.default_rng(6), 30, 2000, a)
    estimated = np.mean([rms_precision(row).effective for row in x])
    assert estimated == pytest.approx(2000 * (1 - a * a) / (1 + a * a), rel=0.10)


@pytest.mark.parametrize("a", [0.0, 0.7])
def test_the_predicted_uncertainty_is_the_spread_of_repeated_measurements(a):
    # 2000 records of 1000 samples: the sample RMS scatters by what rms_precision predicts from
    # one record (the Monte Carlo's own relative error is about 1/sqrt(2 x 2000) = 1.6 %)
    x = one_pole(np.random.default_rng(7), 2000, 1000, a)
    s = x.std(axis=1)
    spread = s.std(ddof=1) / s.mean()
    predicted = np.median([rms_precision(row).relative_uncertainty for row in x[:40]])
    assert predicted == pytest.approx(spread, rel=0.10)
    if a > 0:  # ignoring the correlation would claim about 1/sqrt(2000): 1.9 times too good
        assert 1.0 / math.sqrt(2 * 999) < 0.6 * spread


def test_several_records_add_their_degrees_of_freedom():
    x = np.random.default_rng(8).standard_normal((4, 500))
    p = rms_precision(x)
    assert p.samples == 2000
    assert p.dof == pytest.approx(4 * 499, rel=0.03)  # one mean per record


def test_autocorrelation_of_a_known_sequence():
    # x = [1, -1, 1, -1] (mean 0): biased autocovariances 4/4, -3/4, 2/4 -> ρ = 1, -0.75, 0.5
    assert autocorrelation([1.0, -1.0, 1.0, -1.0], 2).tolist() == pytest.approx([1, -0.75, 0.5])


def test_the_stopping_rule():
    rng = np.random.default_rng(9)
    rows = one_pole(rng, 8, 2000, 0.7)  # ~2.8 % a record
    rule = RmsToTarget(0.02, min_count=1, max_count=8)
    for k in range(1, 9):
        rule.replace_all(rows[:k])
        if rule.stopped:
            break
    assert rule.stopped == "target uncertainty reached" and rule.count == 2
    assert rule.precision is not None and rule.precision.relative_uncertainty <= 0.02
    tight = RmsToTarget(0.001, max_count=3)
    tight.replace_all(rows[:3])
    assert tight.stopped == "capture budget spent" and not tight.reached
    at_least = RmsToTarget(0.5, min_count=2)
    at_least.replace_all(rows[:1])
    assert at_least.stopped == ""  # reached, but fewer than min_count
    flat = RmsToTarget(0.02)
    flat.replace_all(np.zeros((1, 100)))
    assert flat.stopped.startswith("the noise could not be measured")
    with pytest.raises(ValueError):
        RmsToTarget(0.02, min_count=3, max_count=2)
