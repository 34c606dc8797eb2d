"""Finger (photoelectron) spectrum of a light sensor: gain per photoelectron and μ from one fit.

Model (common practice for SiPM finger spectra): peak k (k = 0, 1, ...) is a Gaussian at
``pedestal + k·gain`` with width √(σ₀² + k·σ₁²) (electronic noise plus cell-to-cell gain spread) and a
free area A_k, so crosstalk and afterpulses that reshape the peak heights do not bias the positions.
The fit is a binned Poisson maximum likelihood with the model integrated over each bin (no binning
bias); the errors come from the expected (Fisher) information Σ (∂m/∂θ)(∂m/∂θ)ᵀ / m.  μ comes from
the fitted zero-peak area, μ = -ln(A₀/N) (see :mod:`.photoelectrons`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, signal, special

from ._checks import as_points
from .photoelectrons import mean_photoelectrons

MIN_PULSES = 200
MAX_PEAKS = 16
MODEL_FLOOR = 1e-9
"""Expected counts per bin below this are taken as this (an empty gap between peaks): the deviance
and its slope stay finite."""


@dataclass(frozen=True, eq=False)
class FingerFit:
    """Gain per photoelectron (input units per p.e., e.g. mV) and μ with one-sigma errors;
    ``pedestal`` is the zero peak's position.

    ``areas`` are the fitted peak areas (pulses) from the zero peak up; ``edges``/``counts`` the
    histogram fitted and ``model`` the fitted counts per bin, for plots.
    """

    gain: float
    gain_err: float
    pedestal: float
    pedestal_err: float
    sigma0: float
    sigma1: float
    mu: float
    mu_err: float
    areas: np.ndarray
    edges: np.ndarray
    counts: np.ndarray
    model: np.ndarray
    chi2_ndf: float


def fit_finger_spectrum(
    amplitudes: ArrayLike, *, gain_guess: float | None = None, bins: int | None = None
) -> FingerFit:
    """Fit the finger spectrum of per-pulse ``amplitudes`` (one value per light pulse).

    Histograms them (``bins``, default about 2√N between 60 and 400) and calls
    :func:`fit_finger_histogram`.
    """
    amp = as_points(amplitudes, "amplitudes", min_len=MIN_PULSES)
    nbins = int(bins) if bins is not None else int(np.clip(np.sqrt(amp.size) * 2, 60, 400))
    counts, edges = np.histogram(amp, bins=nbins)
    return fit_finger_histogram(edges, counts, gain_guess=gain_guess)


def fit_finger_histogram(
    edges: ArrayLike,
    counts: ArrayLike,
    *,
    gain_guess: float | None = None,
    total: float | None = None,
) -> FingerFit:
    """Fit the finger spectrum histogrammed as ``counts`` between ``edges`` (a pulse-height
    analyser's output).  ``total`` is the number of light pulses (default: the sum of counts; give it
    when some pulses fell outside the histogram, since μ = -ln(N₀/N) needs every pulse).

    ``gain_guess`` (same units as the edges) seeds the peak spacing; without it the spacing is found
    from the histogram's peaks.  Refuses a spectrum whose peaks cannot be resolved (fewer than two
    peaks, or peaks closer than about two widths) instead of returning a spacing of noise.
    """
    edges_v = as_points(edges, "edges", min_len=17)
    counts_v = as_points(counts, "counts", min_len=16)
    if edges_v.size != counts_v.size + 1 or np.any(np.diff(edges_v) <= 0):
        raise ValueError("edges must rise and be one longer than counts")
    if np.any(counts_v < 0):
        raise ValueError("counts must be >= 0")
    n_pulses = float(counts_v.sum()) if total is None else float(total)
    if counts_v.sum() < MIN_PULSES or n_pulses < counts_v.sum():
        raise ValueError(f"need at least {MIN_PULSES} pulses in the histogram and total >= its sum")
    return _fit(edges_v, counts_v, n_pulses, gain_guess)


def _fit(
    edges: np.ndarray, counts: np.ndarray, n_pulses: float, gain_guess: float | None
) -> FingerFit:
    ped0, gain0, width0 = _start(counts, edges, gain_guess)
    top = float(edges[np.flatnonzero(counts)[-1] + 1])
    npeaks = int(min(MAX_PEAKS, np.floor((top - ped0) / gain0 + 0.5) + 1))
    if npeaks < 2:
        raise ValueError("only the zero peak is present: no photoelectron peak to measure the gain")
    theta0 = _initial(counts, edges, ped0, gain0, width0, npeaks)
    lower = np.r_[edges[0] - gain0, 0.2 * gain0, 1e-6 * gain0, 0.0, np.zeros(npeaks)]
    upper = np.r_[edges[-1], 5.0 * gain0, gain0, gain0, np.full(npeaks, 2.0 * n_pulses)]
    theta0 = np.clip(theta0, lower + 1e-12, upper - 1e-12)
    res = optimize.least_squares(
        _deviance_residuals,
        theta0,
        bounds=(lower, upper),
        args=(edges, counts, npeaks),
        jac=_deviance_jacobian,
        x_scale="jac",
        method="trf",
    )
    theta = res.x
    model = _model(theta, edges, npeaks)
    cov = _covariance(theta, edges, npeaks, model)
    ped, gain, s0, s1 = (float(v) for v in theta[:4])
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    if s0 > 0.5 * gain:
        raise ValueError(
            f"peaks not resolved: width {s0:.3g} against spacing {gain:.3g} (need width < half "
            "the spacing; raise the bias or average less noise)"
        )
    areas = theta[4:].copy()
    mean = mean_photoelectrons(areas[0], n_pulses)
    # The fitted area's variance is its Poisson part (A₀, already in the binomial error, with N
    # fixed) plus what the overlap with peak 1 adds: keep the binomial error and add the excess.
    excess = max(float(cov[4, 4]) - float(areas[0]), 0.0) / float(areas[0]) ** 2
    mu_err = float(np.sqrt(mean.mu_err**2 + excess))
    used = model > 0
    chi2 = float(np.sum(_deviance_residuals(theta, edges, counts, npeaks) ** 2))
    ndf = max(int(np.count_nonzero(used)) - theta.size, 1)
    edges, counts = edges.copy(), counts.copy()
    for arr in (areas, edges, counts, model):
        arr.setflags(write=False)
    return FingerFit(
        gain=gain,
        gain_err=float(err[1]),
        pedestal=ped,
        pedestal_err=float(err[0]),
        sigma0=s0,
        sigma1=s1,
        mu=mean.mu,
        mu_err=mu_err,
        areas=areas,
        edges=edges,
        counts=counts,
        model=model,
        chi2_ndf=chi2 / ndf,
    )


def _start(
    counts: np.ndarray, edges: np.ndarray, gain_guess: float | None
) -> tuple[float, float, float]:
    width = edges[1] - edges[0]
    centres = 0.5 * (edges[1:] + edges[:-1])
    smooth = np.convolve(counts, np.ones(3) / 3.0, mode="same")
    peaks, _ = signal.find_peaks(smooth, prominence=max(3.0, 0.02 * smooth.max()))
    if peaks.size == 0:
        raise ValueError("no peak found in the amplitude spectrum")
    ped = float(centres[peaks[0]])
    if gain_guess is not None:
        gain = float(gain_guess)
        if not np.isfinite(gain) or gain <= 0:
            raise ValueError(f"gain_guess must be a finite number > 0, got {gain_guess!r}")
    else:
        if peaks.size < 2:
            raise ValueError(
                "fewer than two photoelectron peaks resolved: cannot find the spacing "
                "(raise the light, the bias, or give gain_guess)"
            )
        gain = float(np.median(np.diff(centres[peaks[: min(peaks.size, 6)]])))
    core = np.abs(centres - ped) < 0.3 * gain
    weight = counts[core]
    if weight.sum() > 10:
        mean = float(weight @ centres[core]) / float(weight.sum())
        sigma = float(np.sqrt(weight @ (centres[core] - mean) ** 2 / weight.sum()))
    else:
        sigma = 0.15 * gain
    return ped, gain, max(sigma, width)


def _initial(
    counts: np.ndarray, edges: np.ndarray, ped: float, gain: float, sigma: float, npeaks: int
) -> np.ndarray:
    centres = 0.5 * (edges[1:] + edges[:-1])
    k = np.floor((centres - ped) / gain + 0.5).clip(0, npeaks - 1).astype(int)
    areas = np.bincount(k, weights=counts, minlength=npeaks) + 1.0
    return np.r_[ped, gain, sigma, 0.3 * sigma, areas]


def _model(theta: np.ndarray, edges: np.ndarray, npeaks: int) -> np.ndarray:
    return _model_and_jacobian(theta, edges, npeaks, jacobian=False)[0]


def _model_and_jacobian(
    theta: np.ndarray, edges: np.ndarray, npeaks: int, *, jacobian: bool = True
) -> tuple[np.ndarray, np.ndarray | None]:
    """Counts per bin and, when asked, their derivatives by each parameter (analytic: the fit
    runs hundreds of times in the coverage tests)."""
    ped, gain, s0, s1 = theta[:4]
    k = np.arange(npeaks)[:, None]
    centre = ped + k * gain
    width = np.sqrt(s0 * s0 + k * s1 * s1)
    z = (edges[None, :] - centre) / width
    probs = np.diff(special.ndtr(z), axis=1)
    areas = theta[4:, None]
    model = (areas * probs).sum(axis=0)
    if not jacobian:
        return model, None
    pdf = np.exp(-0.5 * z * z) / np.sqrt(2.0 * np.pi)
    d_centre = -areas * np.diff(pdf, axis=1) / width  # ∂m/∂centre_k per bin
    d_width = -areas * np.diff(z * pdf, axis=1) / width  # ∂m/∂width_k per bin
    jac = np.empty((model.size, theta.size))
    jac[:, 0] = d_centre.sum(axis=0)
    jac[:, 1] = (k * d_centre).sum(axis=0)
    jac[:, 2] = (d_width * (s0 / width)).sum(axis=0)
    jac[:, 3] = (d_width * (k * s1 / width)).sum(axis=0)
    jac[:, 4:] = probs.T
    return model, jac


def _deviance_residuals(
    theta: np.ndarray, edges: np.ndarray, counts: np.ndarray, npeaks: int
) -> np.ndarray:
    """Signed square roots of the Poisson deviance per bin: ½Σr² is the negative log-likelihood
    up to a constant, so least squares on r is the maximum-likelihood fit."""
    m = np.maximum(_model(theta, edges, npeaks), MODEL_FLOOR)
    return _signed_root(counts, m)[0]


def _deviance_jacobian(
    theta: np.ndarray, edges: np.ndarray, counts: np.ndarray, npeaks: int
) -> np.ndarray:
    model, jac = _model_and_jacobian(theta, edges, npeaks)
    m = np.maximum(model, MODEL_FLOOR)
    r, dev = _signed_root(counts, m)
    # dr/dm = (1 - n/m)/r; where the deviance vanishes its limit is -1/√m.  Where the model sits on
    # its floor (empty gaps between well-separated peaks) it does not move with the parameters.
    small = dev < 1e-12
    drdm = np.where(small, -1.0 / np.sqrt(m), (1.0 - counts / m) / np.where(small, 1.0, r))
    drdm[model <= MODEL_FLOOR] = 0.0
    return jac * drdm[:, None]


def _signed_root(counts: np.ndarray, m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    dev = np.maximum(2.0 * (m - counts + special.xlogy(counts, counts / m)), 0.0)
    return np.sign(counts - m) * np.sqrt(dev), dev


def _covariance(theta: np.ndarray, edges: np.ndarray, npeaks: int, model: np.ndarray) -> np.ndarray:
    """Inverse of the expected information Σ (∂m/∂θ)(∂m/∂θ)ᵀ / m of Poisson bins."""
    _, jac = _model_and_jacobian(theta, edges, npeaks)
    m = np.maximum(model, 1e-12)
    return np.linalg.pinv(jac.T @ (jac / m[:, None]))
