"""Synthetic light-sensor data with known truth, drawn from numpy generators (not the simulator)."""

from __future__ import annotations

import numpy as np


def fired_cells(rng: np.random.Generator, n: int, mu: float, lam: float) -> np.ndarray:
    """Cells fired per light pulse: Poisson(μ) primaries, each fired cell firing Poisson(λ) more
    (branching Poisson, Vinogradov arXiv:1109.2014)."""
    k = rng.poisson(mu, n)
    return k + branch_cells(rng, k, lam)


def branch_cells(rng: np.random.Generator, seeds: np.ndarray, lam: float) -> np.ndarray:
    """Crosstalk cells triggered by ``seeds`` fired cells per event: each fired cell fires
    Poisson(λ) more, down the generations."""
    total = np.zeros_like(seeds)
    todo = seeds.copy()
    while todo.any():
        todo = rng.poisson(lam * todo)
        total += todo
    return total


def finger_amplitudes(
    rng: np.random.Generator,
    *,
    n: int = 2000,
    mu: float = 1.2,
    gain: float = 10.0,
    pedestal: float = 0.5,
    sigma0: float = 1.2,
    sigma1: float = 0.6,
    lam: float = 0.1,
) -> np.ndarray:
    k = fired_cells(rng, n, mu, lam)
    return pedestal + k * gain + rng.normal(0.0, np.sqrt(sigma0**2 + k * sigma1**2))
