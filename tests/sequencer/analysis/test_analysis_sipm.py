"""Breakdown voltage, its temperature reference and the dark-count staircase."""

from __future__ import annotations

import numpy as np
import pytest
from sensor_spectra import branch_cells

from sequencer.analysis import (
    ELEMENTARY_CHARGE_C,
    breakdown_at_reference,
    breakdown_voltage,
    crosstalk_probability,
    dark_count_staircase,
)


def test_gain_formula_reference_value() -> None:
    # REFERENCES.md (common practice): G = C·(V - V_bd)/e; 100 fF at 3 V → 1.8724527e6
    assert pytest.approx(1.8724527e6, rel=1e-7) == 100e-15 * 3.0 / ELEMENTARY_CHARGE_C


def test_breakdown_against_numpy_polyfit() -> None:
    rng = np.random.default_rng(2)
    v = np.linspace(52.0, 56.0, 9)
    g = 1.87e6 / 3.0 * (v - 51.2) + rng.normal(0, 1.5e4, v.size)
    fit = breakdown_voltage(v, g)
    # numpy.polyfit reference; its cov=True scales by χ²/ν, which is what the unweighted fit does
    (a, b), cov = np.polyfit(v, g, 1, cov=True)
    assert fit.slope == pytest.approx(a, rel=1e-10)
    assert fit.v_bd == pytest.approx(-b / a, rel=1e-10)
    jac = np.array([b / a**2, -1.0 / a])  # ∂(-b/a)/∂(a, b)
    assert fit.v_bd_err == pytest.approx(np.sqrt(jac @ cov @ jac), rel=1e-8)
    assert abs(fit.v_bd - 51.2) < 4 * fit.v_bd_err


def test_breakdown_weighted_error_coverage() -> None:
    v = np.linspace(52.0, 56.0, 5)
    sig = np.full(v.size, 2e4)
    hits = 0
    for seed in range(400):
        g = 6.2e5 * (v - 51.2) + np.random.default_rng(seed).normal(0, 2e4, v.size)
        fit = breakdown_voltage(v, g, sig)
        hits += abs(fit.v_bd - 51.2) < fit.v_bd_err
    # one-sigma coverage of a Gaussian estimate: 68.3 % (binomial spread ±2.3 % at 400 trials)
    assert 0.61 < hits / 400 < 0.76


def test_breakdown_refuses_flat_gain() -> None:
    with pytest.raises(ValueError, match="does not rise"):
        breakdown_voltage([50, 51, 52, 53], [1.0, 1.01, 0.99, 1.0])


def test_breakdown_at_reference_temperature() -> None:
    # V_bd(T_ref) = V_bd(T) - k (T - T_ref): 54 mV/K, 30 °C against 25 °C → 0.27 V lower
    assert breakdown_at_reference(
        51.5, 30.0, reference_C=25.0, coefficient_mV_per_K=54.0
    ) == pytest.approx(51.23)
    with pytest.raises(ValueError):
        breakdown_at_reference(51.5, float("nan"), reference_C=25.0, coefficient_mV_per_K=54.0)


def _staircase(rng: np.random.Generator, lam: float, dcr_hz: float, gate_s: float, gain: float):
    # every dark pulse fires one cell, and each fired cell fires Poisson(λ) neighbours (Vinogradov)
    n = rng.poisson(dcr_hz * gate_s)
    heights = 1 + branch_cells(rng, np.ones(n, dtype=int), lam)
    thr = np.linspace(0.2, 3.2, 16) * gain
    counts = np.array([np.count_nonzero(heights * gain > t) for t in thr])
    return thr, counts


def test_staircase_crosstalk_matches_branching_model() -> None:
    lam = 0.1053605  # P_ct = 0.1 (REFERENCES.md, Vinogradov arXiv:1109.2014)
    thr, counts = _staircase(np.random.default_rng(8), lam, 200e3, 0.5, 12.0)
    st = dark_count_staircase(thr, counts, 0.5, gain_mV=12.0)
    assert st.dcr_half == pytest.approx(200e3, rel=0.01)
    assert abs(st.crosstalk - crosstalk_probability(lam)) < 3 * st.crosstalk_err
    assert st.crosstalk_err < 0.003


def test_staircase_negative_polarity() -> None:
    thr, counts = _staircase(np.random.default_rng(9), 0.2, 50e3, 1.0, 8.0)
    neg = dark_count_staircase(-thr - 3.0, counts, 1.0, gain_mV=-8.0, baseline_mV=-3.0)
    pos = dark_count_staircase(thr, counts, 1.0, gain_mV=8.0)
    assert neg.crosstalk == pytest.approx(pos.crosstalk, rel=1e-12)


def test_staircase_refuses_level_outside_scan_and_empty_gates() -> None:
    with pytest.raises(ValueError, match="outside"):
        dark_count_staircase([1.0, 2.0, 3.0], [10, 5, 1], 1.0, gain_mV=10.0)
    with pytest.raises(ValueError, match="no counts"):
        dark_count_staircase([2.0, 10.0, 20.0, 30.0], [10, 5, 0, 0], 1.0, gain_mV=10.0)
