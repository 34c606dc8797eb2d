"""Photoelectron statistics of a light sensor: mean number from the zero peak, the branching-Poisson
(generalised Poisson) law of a sensor with optical crosstalk.

Definitions:
- Mean photoelectrons from the zero peak: the primaries of a pulsed light source follow Poisson
  statistics, P(0) = e^(-μ), so μ = -ln(N₀/N) (standard; insensitive to crosstalk and afterpulses,
  which only move events between non-zero peaks).
- Crosstalk as a branching Poisson process (S. Vinogradov, "Analytical models of probability
  distribution and excess noise factor of solid state photomultiplier signals with crosstalk",
  arXiv:1109.2014): each fired cell fires Poisson(λ) neighbours, so P(no crosstalk) = e^(-λ) and
  P_ct = 1 - e^(-λ); the number of fired cells for Poisson(μ) primaries is the generalised Poisson
  law P(k) = μ (μ + kλ)^(k-1) e^(-μ-kλ) / k!.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special


@dataclass(frozen=True)
class MeanPhotoelectrons:
    """μ (photoelectrons per pulse) with its one-sigma binomial uncertainty."""

    mu: float
    mu_err: float
    n_zero: float
    n_total: float


def mean_photoelectrons(n_zero: float, n_total: float) -> MeanPhotoelectrons:
    """μ = -ln(N₀/N) from ``n_zero`` pulses in the zero (pedestal) peak out of ``n_total``.

    Uncertainty: N₀ is binomial out of N, so σ_μ = √((1 - p₀)/(N p₀)) with p₀ = N₀/N.  Refuses an
    empty zero peak (μ unbounded: lower the light) and a spectrum with only the zero peak (μ = 0
    cannot be told from no light).
    """
    n0, n = float(n_zero), float(n_total)
    if not (np.isfinite(n0) and np.isfinite(n)) or n <= 0:
        raise ValueError(f"n_total must be a finite count > 0, got {n_total!r}")
    if n0 <= 0:
        raise ValueError("no pulse in the zero peak: μ is unbounded (lower the light intensity)")
    if n0 > n:
        raise ValueError(f"n_zero ({n0:g}) exceeds n_total ({n:g})")
    if n0 == n:
        raise ValueError("every pulse is in the zero peak: no light seen (μ cannot be measured)")
    p0 = n0 / n
    return MeanPhotoelectrons(
        mu=-float(np.log(p0)), mu_err=float(np.sqrt((1.0 - p0) / (n * p0))), n_zero=n0, n_total=n
    )


def crosstalk_probability(lam: float) -> float:
    """P_ct = 1 - e^(-λ) for the branching parameter λ (Vinogradov, arXiv:1109.2014)."""
    lv = float(lam)
    if not np.isfinite(lv) or lv < 0.0:
        raise ValueError(f"lam must be a finite number >= 0, got {lam!r}")
    return float(-np.expm1(-lv))


def crosstalk_lambda(p_ct: float) -> float:
    """λ = -ln(1 - P_ct): the inverse of :func:`crosstalk_probability`."""
    pv = float(p_ct)
    if not np.isfinite(pv) or pv < 0.0 or pv >= 1.0:
        raise ValueError(f"p_ct must be a probability in [0, 1), got {p_ct!r}")
    return float(-np.log1p(-pv))


def generalised_poisson_pmf(k: ArrayLike, mu: float, lam: float) -> np.ndarray:
    """P(k fired cells) = μ (μ + kλ)^(k-1) e^(-μ-kλ) / k! for Poisson(μ) primaries with branching λ.

    Reduces to Poisson(μ) at λ = 0; its mean is μ/(1 - λ) (P. C. Consul, *Generalized Poisson
    Distributions*, 1989, from memory).  Needs 0 <= λ < 1.
    """
    kv = np.asarray(k, dtype=np.float64)
    if np.any(kv < 0) or np.any(kv != np.round(kv)):
        raise ValueError("k must be whole numbers >= 0")
    m, lv = float(mu), float(lam)
    if not np.isfinite(m) or m <= 0.0:
        raise ValueError(f"mu must be a finite number > 0, got {mu!r}")
    if not np.isfinite(lv) or lv < 0.0 or lv >= 1.0:
        raise ValueError(f"lam must be in [0, 1), got {lam!r}")
    log_p = np.log(m) + special.xlogy(kv - 1.0, m + kv * lv) - m - kv * lv - special.gammaln(kv + 1)
    return np.exp(log_p)
