"""The stopping rule of captures averaged to a target uncertainty (sequencer/analysis/averaging.py)
against the GUM's Type A evaluation (JCGM 100:2008 §4.2.3: s(q̄) = s(q_k)/√n) as scipy computes
it (scipy.stats.sem, ddof = 1), and the per-capture heights against a least-squares fit by numpy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from sequencer.analysis.averaging import MeanToTarget, capture_heights


def test_the_standard_error_is_the_gums_type_a_of_the_mean():
    values = [10.2, 9.8, 10.5, 9.9, 10.1]
    rule = MeanToTarget(1.0, min_count=3, max_count=10)
    for v in values:
        rule.add(v)
        if rule.stopped:
            break
    assert len(rule.values) == 3  # reached at the minimum count: s(q̄) ≈ 0.2 <= 1.0
    assert rule.standard_error == pytest.approx(stats.sem(values[:3], ddof=1), rel=1e-12)
    assert rule.stopped == "target uncertainty reached" and rule.reached


def test_it_stops_exactly_when_the_standard_error_reaches_the_target():
    rng = np.random.default_rng(5)
    draws = rng.normal(50.0, 1.0, 200)
    rule = MeanToTarget(0.25, min_count=3, max_count=200)
    for v in draws:
        rule.add(float(v))
        if rule.stopped:
            break
    n = len(rule.values)
    # scipy's sem of every shorter prefix (n >= 3) is above the target, of this one at or below
    assert stats.sem(draws[:n]) <= 0.25
    assert all(stats.sem(draws[:k]) > 0.25 for k in range(3, n))
    # with σ = 1 the target 0.25 needs about (1 / 0.25)^2 = 16 captures (GUM §4.2.3)
    assert 8 <= n <= 32


def test_the_budget_bounds_the_count_and_says_so():
    rule = MeanToTarget(1e-6, min_count=2, max_count=4)
    for v in (1.0, 2.0, 3.0, 4.0, 5.0):
        if rule.stopped:
            break
        rule.add(v)
    assert len(rule.values) == 4 and rule.stopped == "capture budget spent" and not rule.reached


def test_an_unmeasurable_capture_stops_at_once():
    rule = MeanToTarget(0.1)
    rule.add(1.0)
    rule.add(math.nan)
    assert rule.stopped == "a capture's height could not be measured" and not rule.reached


@pytest.mark.parametrize("kwargs", [{"target": 0.0}, {"target": 1.0, "min_count": 1},
                                    {"target": 1.0, "min_count": 5, "max_count": 4}])  # fmt: skip
def test_impossible_settings_are_refused(kwargs):
    with pytest.raises(ValueError):
        MeanToTarget(**kwargs)


def test_capture_heights_are_the_least_squares_amplitudes_of_the_mean_shape():
    rng = np.random.default_rng(9)
    t = np.arange(200)
    shape = np.where(t >= 50, np.exp(-(t - 50) / 30.0) - np.exp(-(t - 50) / 5.0), 0.0)
    shape /= shape.max()
    amps = np.array([9.0, 10.0, 11.0])
    rows = 0.3 + amps[:, None] * shape + rng.normal(0.0, 0.05, (3, 200))
    heights = capture_heights(rows, 40)
    # numpy's least squares of each baseline-free row on the unit-peak mean shape
    y = rows - rows[:, :40].mean(axis=1, keepdims=True)
    unit = y.mean(axis=0) / np.max(np.abs(y.mean(axis=0)))
    expected = [np.linalg.lstsq(unit[:, None], r, rcond=None)[0][0] for r in y]
    assert heights == pytest.approx(expected, rel=1e-9)
    assert heights == pytest.approx(amps, abs=0.1)  # and near the true amplitudes


def test_capture_heights_refuse_a_non_finite_sample():
    rows = np.ones((2, 20))
    rows[1, 7] = np.nan
    assert np.all(np.isnan(capture_heights(rows, 5)))
