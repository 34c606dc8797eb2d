"""fit_line and inl_percent against NIST StRD, Bevington & Robinson and IEEE 1241 examples."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from sequencer.analysis import fit_line, inl_percent, lines

# A copy of the public NIST StRD "Norris" dataset (certified values in its header), kept with the tests.
NORRIS = Path(__file__).resolve().parents[2] / "data" / "nist-strd-norris.csv"


def _norris() -> tuple[np.ndarray, np.ndarray]:
    data = np.loadtxt(NORRIS, delimiter=",", comments="#", skiprows=4)
    return data[:, 1], data[:, 0]  # columns are y,x


def test_norris_certified_values() -> None:
    x, y = _norris()
    fit = fit_line(x, y)
    # NIST StRD "Norris" certified values (shared/data/nist-strd-norris.csv header, REFERENCES.md)
    assert fit.slope == pytest.approx(1.00211681802045, rel=1e-12)
    assert fit.intercept == pytest.approx(-0.262323073774029, rel=1e-10)
    assert fit.slope_err == pytest.approx(0.429796848199937e-03, rel=1e-10)
    assert fit.intercept_err == pytest.approx(0.232818234301152, rel=1e-10)
    # NIST: residual SD 0.884796396144373 (df 34) and residual SS 26.6173985294224
    assert np.sqrt(fit.chi2_ndf) == pytest.approx(0.884796396144373, rel=1e-10)
    assert float(fit.residuals @ fit.residuals) == pytest.approx(26.6173985294224, rel=1e-10)
    # NIST: R^2 0.999993745883712, from our residuals
    r2 = 1.0 - fit.residuals @ fit.residuals / np.sum((y - y.mean()) ** 2)
    assert r2 == pytest.approx(0.999993745883712, rel=1e-12)


BEV_X = np.arange(0.0, 51.0, 10.0)
BEV_Y = np.array([1.2, 51.0, 101.9, 151.1, 202.4, 251.3])
BEV_S = np.array([0.5, 0.5, 0.6, 0.7, 0.8, 1.0])


def test_weighted_example_bevington() -> None:
    fit = fit_line(BEV_X, BEV_Y, sigma=BEV_S)
    # REFERENCES.md, Bevington & Robinson 3rd ed. §6.4 style weighted example
    assert fit.intercept == pytest.approx(1.130673, abs=1e-6)
    assert fit.intercept_err == pytest.approx(0.386483, abs=1e-6)
    assert fit.slope == pytest.approx(5.014786, abs=1e-6)
    assert fit.slope_err == pytest.approx(0.016590, abs=1e-6)
    assert fit.chi2_ndf == pytest.approx(0.613628, abs=1e-6)  # χ² 2.454511 over ν = 4
    assert fit.chi2_ndf * 4 == pytest.approx(2.454511, abs=1e-6)


def test_weighted_matches_numpy_polyfit_unscaled() -> None:
    # numpy.polyfit reference: weights are 1/σ and cov="unscaled" for known σ (REFERENCES.md pitfall)
    coef, cov = np.polyfit(BEV_X, BEV_Y, 1, w=1.0 / BEV_S, cov="unscaled")
    fit = fit_line(BEV_X, BEV_Y, sigma=BEV_S)
    assert fit.slope == pytest.approx(coef[0], rel=1e-12)
    assert fit.intercept == pytest.approx(coef[1], rel=1e-10)
    assert fit.slope_err == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)
    assert fit.intercept_err == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-10)
    assert fit.covariance == pytest.approx(cov[0, 1], rel=1e-10)


def test_scalar_sigma_equals_equal_weights() -> None:
    # Bevington §6.4: with equal σ the weighted estimates equal the unweighted ones
    a = fit_line(BEV_X, BEV_Y)
    b = fit_line(BEV_X, BEV_Y, sigma=0.7)
    assert b.slope == pytest.approx(a.slope, rel=1e-12)
    assert b.slope_err == pytest.approx(0.7 / np.sqrt(np.sum((BEV_X - BEV_X.mean()) ** 2)))


Q_FC = [0, 25, 50, 75, 100]
V_MV = [2, 252, 501, 748, 993]


def test_inl_ieee1241_best_fit_example() -> None:
    # REFERENCES.md, IEEE Std 1241-2010 independently based line: INL 0.181598 %
    assert inl_percent(Q_FC, V_MV) == pytest.approx(0.181598, abs=5e-7)
    fit = fit_line(Q_FC, V_MV)
    assert fit.slope == pytest.approx(9.912)  # gain 9.912 mV/fC
    assert fit.intercept == pytest.approx(3.6)  # offset 3.6 mV
    np.testing.assert_allclose(fit.residuals, [-1.6, 0.6, 1.8, 1.0, -1.8], atol=1e-9)


def test_inl_ieee1241_terminal_example() -> None:
    # REFERENCES.md, IEEE Std 1241-2010 terminal-based line: INL 0.353179 %
    assert inl_percent(Q_FC, V_MV, method="terminal") == pytest.approx(0.353179, abs=5e-7)
    # order of the points does not matter: the terminal line joins lowest and highest x
    assert inl_percent(Q_FC[::-1], V_MV[::-1], method="terminal") == pytest.approx(
        0.353179, abs=5e-7
    )


def test_inl_of_a_perfect_line_is_zero() -> None:
    x = np.linspace(0, 10, 11)
    assert inl_percent(x, 3 * x + 1) == pytest.approx(0.0, abs=1e-12)


def test_residuals_are_read_only() -> None:
    fit = fit_line(Q_FC, V_MV)
    with pytest.raises(ValueError):
        fit.residuals[0] = 0.0


@pytest.mark.parametrize(
    ("x", "y", "sigma", "match"),
    [
        ([1, 2], [1, 2], None, "at least 3"),
        ([1, 2, 3, 4], [1, 2, 3], None, "differ in length"),
        ([1, 2, np.nan], [1, 2, 3], None, "non-finite"),
        ([2, 2, 2], [1, 2, 3], None, "all equal"),
        ([1, 2, 3], [1, 2, 3], [1, 0, 1], "sigma must be finite and > 0"),
        ([1, 2, 3], [1, 2, 3], [1, 1], "one value per point"),
        ([[1, 2], [3, 4]], [1, 2, 3, 4], None, "1-D"),
    ],
)
def test_fit_line_rejects_bad_input(x, y, sigma, match) -> None:
    with pytest.raises(ValueError, match=match):
        fit_line(x, y, sigma)


def test_inl_rejects_unknown_method_and_flat_line() -> None:
    with pytest.raises(ValueError, match="method must be one of"):
        inl_percent(Q_FC, V_MV, method="endpoint")
    with pytest.raises(ValueError, match="flat"):
        inl_percent([0, 1, 2], [5, 5, 5])


@pytest.mark.parametrize("noise_mV", [0.02, 0.3])
def test_inl_uncertainty_covers_the_truth_under_noise(noise_mV):
    # Truth: the INL of the noise-free curve S·tanh(A/S) over 8 points up to 160 mV (S = 1500 mV,
    # as a healthy simulated channel), from numpy.polyfit's least-squares line.  Over repeated
    # noisy realisations the stated k = 2 interval value ± 2u must hold the truth about as often as
    # a 95 % interval should (>= 90 % of 300; binomial sd ~1.3 %); the first-order part alone does
    # not when the noise bias of the largest residual matters (the larger noise here).
    rng = np.random.default_rng(5)
    amps = np.linspace(20.0, 160.0, 8)
    clean = 1500.0 * np.tanh(amps / 1500.0)
    slope, intercept = np.polyfit(amps, clean, 1)
    truth = 100 * np.max(np.abs(clean - (slope * amps + intercept))) / (slope * np.ptp(amps))
    covered = first_order_covered = 0
    for _ in range(300):
        got = lines.inl_with_uncertainty(amps, clean + rng.normal(0.0, noise_mV, 8), noise_mV)
        floor = lines.inl_noise_floor(
            np.eye(8) - np.column_stack([amps, np.ones(8)]) @ np.linalg.pinv(
                np.column_stack([amps, np.ones(8)])
            ),
            np.full(8, noise_mV),
            abs(slope) * np.ptp(amps),
        )
        first = math.sqrt(max(got.uncertainty**2 - floor**2, 0.0))
        covered += abs(got.value - truth) <= 2 * got.uncertainty
        first_order_covered += abs(got.value - truth) <= 2 * first
    assert covered >= 270
    if noise_mV >= 0.3:
        assert first_order_covered < 270  # the floor is what makes the interval honest here
