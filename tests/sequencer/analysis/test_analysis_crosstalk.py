"""crosstalk_percent / crosstalk_peak_percent for a scaled and for a differentiated aggressor."""

from __future__ import annotations

import numpy as np
import pytest
from analysis_shapes import cr_rc, time_axis

from sequencer.analysis import crosstalk_db, crosstalk_peak_percent, crosstalk_percent

DT = 0.5
T = time_axis(4000, DT)
N_BASE = 200
TAU = 50.0


def _aggressor(amplitude: float = 800.0) -> np.ndarray:
    return 2.0 + amplitude * cr_rc(T, 200.0, TAU, 2) / 0.270671


def test_scaled_copy_gives_its_scale() -> None:
    # DESIGN.md simulator physics: victim pulse = k · aggressor pulse; crosstalk = 100 k
    agg = _aggressor()
    victim = -0.4 + 0.01 * (agg - 2.0)
    assert crosstalk_percent(agg, victim, DT, N_BASE) == pytest.approx(1.0, rel=1e-12)
    assert crosstalk_peak_percent(agg, victim, DT, N_BASE) == pytest.approx(1.0, rel=1e-9)


def test_scaled_copy_in_noise() -> None:
    rng = np.random.default_rng(3)
    agg = _aggressor() + 0.3 * rng.standard_normal(T.size)
    victims = 0.005 * (_aggressor() - 2.0) + 0.3 * rng.standard_normal((200, T.size))
    pct = crosstalk_percent(agg, victims, DT, N_BASE)
    assert pct.shape == (200,)
    # error propagation for k = Σ(v - b)a / Σa², white noise σ, b the mean of n_b baseline samples:
    # var k = σ²/Σa² + (σ²/n_b)(Σa/Σa²)²  (standard first-order propagation)
    a = _aggressor() - 2.0
    expected_sd = 100 * 0.3 * np.sqrt(1 / (a @ a) + (a.sum() / (a @ a)) ** 2 / N_BASE)
    assert np.mean(pct) == pytest.approx(0.5, abs=4 * expected_sd / np.sqrt(pct.size))
    assert np.std(pct) == pytest.approx(expected_sd, rel=0.15)


def test_differentiated_aggressor() -> None:
    # REFERENCES.md, capacitive coupling: victim ≈ R_in C_c dV_a/dt, bipolar, zero net area, zero
    # crossing at the aggressor's peak; for a CR-RC² aggressor max|V| ratio = 0.851882 · R_in C_c/τ
    rc_ns = 0.5  # R_in C_c
    agg = _aggressor()
    victim = rc_ns * np.gradient(agg, DT, edge_order=2)
    peak_pct = crosstalk_peak_percent(agg, victim, DT, N_BASE)
    assert peak_pct == pytest.approx(100 * 0.851882 * rc_ns / TAU, rel=2e-4)
    # the template figure sees (almost) nothing: Σ a·a' = [a²/2] = 0 for a pulse back at baseline
    assert abs(crosstalk_percent(agg, victim, DT, N_BASE)) < 1e-3 * peak_pct


def test_row_paired_aggressors() -> None:
    k = np.array([0.01, 0.02, 0.03])
    aggs = np.stack([_aggressor(a) for a in (500.0, 700.0, 900.0)])
    victims = k[:, None] * (aggs - 2.0)
    np.testing.assert_allclose(crosstalk_percent(aggs, victims, DT, N_BASE), 100 * k)
    with pytest.raises(ValueError, match="pair row by row"):
        crosstalk_percent(aggs[:2], victims, DT, N_BASE)
    with pytest.raises(ValueError, match="samples per trace"):
        crosstalk_percent(aggs[0], victims[:, :100], DT, N_BASE)


def test_flat_aggressor_is_rejected() -> None:
    flat = np.full(T.size, 3.0)
    with pytest.raises(ValueError, match="flat"):
        crosstalk_percent(flat, flat, DT, N_BASE)
    with pytest.raises(ValueError, match="no pulse of its polarity"):
        crosstalk_peak_percent(flat, flat, DT, N_BASE)


def test_db_conversions() -> None:
    # REFERENCES.md crosstalk conversions: 1 % = -40 dB, 0.5 % = -46.0206 dB, 3 % = -30.4576 dB
    assert crosstalk_db(1.0) == pytest.approx(-40.0, abs=1e-12)
    np.testing.assert_allclose(crosstalk_db([0.5, 3.0]), [-46.0206, -30.4576], atol=5e-5)
    with pytest.raises(ValueError, match="> 0"):
        crosstalk_db(0.0)
