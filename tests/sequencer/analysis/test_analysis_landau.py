"""Landau ⊗ Gauss fit against scipy.stats.landau (scipy >= 1.15) on sampled data."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from sequencer.analysis import LANDAU_MODE, fit_landau_gauss, landau_gauss_pdf


def test_mode_of_scipy_landau() -> None:
    # REFERENCES.md: scipy.stats.landau(0, 1) has its mode at -0.4293148 (numerical), median
    # 0.5756301 — the parametrisation our MPV uses
    found = optimize.minimize_scalar(lambda x: -stats.landau.pdf(x), bracket=(-1, 0, 1)).x
    assert pytest.approx(found, abs=1e-6) == LANDAU_MODE
    assert pytest.approx(-0.4293148, abs=5e-7) == LANDAU_MODE
    assert stats.landau.median() == pytest.approx(0.5756301, abs=1e-7)


def test_convolved_density_is_normalised_and_tends_to_landau() -> None:
    x = np.linspace(-20, 400, 20001)
    dens = landau_gauss_pdf(x, 10.0, 2.0, 1.5)
    assert integrate.trapezoid(dens, x) == pytest.approx(1.0, abs=0.01)  # tail beyond 400 ~0.3 %
    narrow = landau_gauss_pdf(x[:3000], 10.0, 2.0, 0.01)
    assert narrow == pytest.approx(stats.landau.pdf(x[:3000], 10.0, 2.0), abs=2e-3)


@pytest.mark.parametrize(("loc", "scale", "sigma"), [(30.0, 3.0, 2.0), (120.0, 8.0, 12.0)])
def test_mpv_recovered_from_sampled_data(loc: float, scale: float, sigma: float) -> None:
    hits = 0
    for seed in range(25):
        rng = np.random.default_rng(seed)
        x = stats.landau.rvs(loc=loc, scale=scale, size=3000, random_state=rng)
        x += rng.normal(0.0, sigma, x.size)
        fit = fit_landau_gauss(x)
        truth = loc + scale * LANDAU_MODE
        assert abs(fit.mpv - truth) < 4 * fit.mpv_err
        hits += abs(fit.mpv - truth) < fit.mpv_err
    # one-sigma coverage ≈ 68 %; 25 trials: 10 or more (binomial 1st percentile ≈ 11)
    assert hits >= 10


def test_refuses_too_few_events() -> None:
    x = stats.landau.rvs(loc=30, scale=3, size=150, random_state=np.random.default_rng(1))
    with pytest.raises(ValueError, match="events"):
        fit_landau_gauss(x, value_range=(100.0, 200.0))
