"""Landau convolved with a Gaussian: the charge spectrum of minimum-ionising particles in a thin
scintillator, and its most probable value (the light yield when the charge is in photoelectrons).

Parametrisation (stated, since codes differ): the Landau part is ``scipy.stats.landau(loc, scale)``
(scipy >= 1.15), whose standard density (loc 0, scale 1) peaks at x = -0.4293148 (numerical; other
codes place their mode at -0.22278 in their own parametrisation).  The most probable value reported
is the mode of that Landau, MPV = loc + scale·(-0.4293148); the Gaussian (σ, photostatistics and
electronics) only smears it.  The fit is a binned Poisson maximum likelihood over the histogram range
with the model integrated per bin; the convolution is numerical on a grid finer than the bins.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, signal, special, stats

from ._checks import as_points

LANDAU_MODE = -0.4293145
"""Mode of scipy.stats.landau(0, 1), found numerically (REFERENCES.md: -0.4293148)."""

MIN_EVENTS = 100
_GRID_PER_BIN = 8
_MAX_GRID = 20_000
"""Grid points over the fitted range at most: bounds the cost of a very finely binned histogram."""


@dataclass(frozen=True, eq=False)
class LandauFit:
    """MPV, Landau scale (width parameter) and Gaussian σ, in the input's units, with one-sigma
    errors; ``edges``/``counts``/``model`` are the fitted histogram and model counts, for plots."""

    mpv: float
    mpv_err: float
    scale: float
    scale_err: float
    sigma: float
    sigma_err: float
    edges: np.ndarray
    counts: np.ndarray
    model: np.ndarray
    chi2_ndf: float


def fit_landau_gauss(
    values: ArrayLike, *, bins: int = 80, value_range: tuple[float, float] | None = None
) -> LandauFit:
    """Fit Landau ⊗ Gauss to per-event ``values`` (charges, amplitudes) inside ``value_range``
    (default: 1st to 97th percentile, so a threshold edge and the long tail's sparse end are left
    out); histograms them and calls :func:`fit_landau_histogram`."""
    v = as_points(values, "values", min_len=MIN_EVENTS)
    lo, hi = value_range if value_range is not None else tuple(np.percentile(v, [1.0, 97.0]))
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        raise ValueError(f"value_range must be finite with low < high, got {(lo, hi)}")
    counts, edges = np.histogram(v, bins=int(bins), range=(float(lo), float(hi)))
    return fit_landau_histogram(edges, counts)


def fit_landau_histogram(edges: ArrayLike, counts: ArrayLike) -> LandauFit:
    """Fit Landau ⊗ Gauss to a histogram (``counts`` between ``edges``), normalised over its range
    (so a threshold below it or a tail beyond it does not bias the shape).  Refuses fewer than 100
    events."""
    edges = as_points(edges, "edges", min_len=6).copy()
    counts = as_points(counts, "counts", min_len=5).copy()
    if edges.size != counts.size + 1 or np.any(np.diff(edges) <= 0) or np.any(counts < 0):
        raise ValueError("edges must rise and be one longer than counts; counts must be >= 0")
    lo, hi = float(edges[0]), float(edges[-1])
    total = float(counts.sum())
    if total < MIN_EVENTS:
        raise ValueError(f"only {int(total)} events inside {lo:g}..{hi:g}; need {MIN_EVENTS}")
    theta0 = _start(edges, counts)
    width = float(edges[1] - edges[0])
    span = float(hi - lo)
    lower = np.array([lo - span, 1e-3 * width, 1e-3 * width, 0.1 * total])
    upper = np.array([hi + span, span, span, 10.0 * total])
    res = optimize.least_squares(
        _residuals,
        np.clip(theta0, lower + 1e-6 * (upper - lower), upper - 1e-6 * (upper - lower)),
        bounds=(lower, upper),
        args=(edges, counts),
        x_scale="jac",
    )
    theta = res.x
    model = _model(theta, edges)
    cov = _covariance(theta, edges, model)
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    loc, scale, sigma = (float(x) for x in theta[:3])
    mpv = loc + scale * LANDAU_MODE
    mpv_var = cov[0, 0] + LANDAU_MODE**2 * cov[1, 1] + 2.0 * LANDAU_MODE * cov[0, 1]
    chi2 = float(np.sum(_residuals(theta, edges, counts) ** 2))
    for arr in (edges, counts, model):
        arr.setflags(write=False)
    return LandauFit(
        mpv=mpv,
        mpv_err=float(np.sqrt(max(mpv_var, 0.0))),
        scale=scale,
        scale_err=float(err[1]),
        sigma=sigma,
        sigma_err=float(err[2]),
        edges=edges,
        counts=counts,
        model=model,
        chi2_ndf=chi2 / max(counts.size - theta.size, 1),
    )


def landau_gauss_pdf(x: ArrayLike, loc: float, scale: float, sigma: float) -> np.ndarray:
    """Density of Landau(loc, scale) ⊗ Normal(0, σ) at ``x`` (numerical convolution)."""
    xv = np.asarray(x, dtype=np.float64)
    step = min(scale, sigma) / 8.0
    grid = np.arange(xv.min() - 8 * sigma - 50 * scale, xv.max() + 8 * sigma + step, step)
    dens = _convolved_density(grid, loc, scale, sigma, step)
    return np.interp(xv, grid, dens)


def _convolved_density(grid: np.ndarray, loc: float, scale: float, sigma: float, step: float):
    land = stats.landau.pdf(grid, loc=loc, scale=scale)
    half = int(np.ceil(6.0 * sigma / step))
    t = np.arange(-half, half + 1) * step
    kern = np.exp(-0.5 * (t / sigma) ** 2)
    kern /= kern.sum()
    return signal.fftconvolve(land, kern, mode="same")


def _model(theta: np.ndarray, edges: np.ndarray) -> np.ndarray:
    loc, scale, sigma, norm = theta
    width = edges[1] - edges[0]
    step = max(
        min(width / _GRID_PER_BIN, scale / 4.0, sigma / 2.0), (edges[-1] - edges[0]) / _MAX_GRID
    )
    pad = 6.0 * sigma
    grid = np.arange(edges[0] - pad, edges[-1] + pad + step, step)
    dens = _convolved_density(grid, loc, scale, sigma, step)
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (dens[1:] + dens[:-1]) * step)])
    at_edges = np.interp(edges, grid, cdf)
    probs = np.diff(at_edges)
    return norm * probs / max(float(probs.sum()), 1e-300)


def _residuals(theta: np.ndarray, edges: np.ndarray, counts: np.ndarray) -> np.ndarray:
    m = np.maximum(_model(theta, edges), 1e-300)
    dev = 2.0 * (m - counts + special.xlogy(counts, counts / m))
    return np.sign(counts - m) * np.sqrt(np.maximum(dev, 0.0))


def _start(edges: np.ndarray, counts: np.ndarray) -> np.ndarray:
    centres = 0.5 * (edges[1:] + edges[:-1])
    peak = float(centres[int(np.argmax(np.convolve(counts, np.ones(3) / 3, mode="same")))])
    cdf = np.concatenate([[0.0], np.cumsum(counts)]) / counts.sum()
    q25, q50 = np.interp([0.25, 0.5], cdf, edges)
    scale = max(float(q50 - q25) / 1.5, edges[1] - edges[0])
    return np.array([peak - scale * LANDAU_MODE, scale, 0.5 * scale, float(counts.sum())])


def _covariance(theta: np.ndarray, edges: np.ndarray, model: np.ndarray) -> np.ndarray:
    jac = np.empty((model.size, theta.size))
    for i in range(theta.size):
        h = 1e-5 * max(abs(theta[i]), float(edges[1] - edges[0]))
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        jac[:, i] = (_model(up, edges) - _model(down, edges)) / (2.0 * h)
    fisher = jac.T @ (jac / np.maximum(model, 1e-12)[:, None])
    return np.linalg.pinv(fisher)
