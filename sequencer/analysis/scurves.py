"""Discriminator S-curves: the 50 % threshold and its width from a threshold scan.

Model: the fraction of injected pulses that fire at threshold ``thr`` is
ε(thr) = ½ erfc((thr - μ)/(√2 σ)) = ``scipy.stats.norm.sf(thr, μ, σ)``, falling with threshold.
μ is the 50 % point, σ the RMS noise at the discriminator input (with jitter and threshold
spread in quadrature).  The fit is a binomial maximum likelihood, so points at 0 % and 100 % count
with their true weight (T. Ullrich, Z. Xu, "Treatment of errors in efficiency calculations",
BNL 2003, arXiv:physics/0701199).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, special, stats

from ._checks import as_points, same_length


@dataclass(frozen=True)
class SCurveFit:
    """μ (mV) and σ (mV) of an S-curve with one-sigma errors.

    ``chi2_ndf`` is the likelihood-ratio χ² (binomial deviance) per degree of freedom, n - 2
    (S. Baker, R. D. Cousins, NIM 221 (1984) 437, from memory); about 1 for a good fit.  Points
    far outside the transition (0 or all fired, as predicted) add almost nothing, so a scan that
    runs well past both ends gives values below 1 (common practice: judge it with that in mind).
    """

    mu: float
    sigma: float
    mu_err: float
    sigma_err: float
    chi2_ndf: float


def fit_s_curve(thresholds: ArrayLike, fired: ArrayLike, trials: ArrayLike) -> SCurveFit:
    """Binomial maximum-likelihood fit of ε(thr) = norm.sf(thr, μ, σ) to counts ``fired`` of
    ``trials`` injected pulses per threshold (mV).

    ``trials`` is one count for all thresholds or one per threshold.  The negative log-likelihood
    is minimised over (μ, ln σ) with scipy.optimize.minimize; the errors are the square roots of
    the diagonal of the inverse Fisher information Σ N ε'² / (ε(1 - ε)) at the optimum.  Needs at
    least 3 thresholds, 2 of them inside the transition (0 < fired < trials).
    """
    thr = as_points(thresholds, "thresholds", min_len=3)
    k = as_points(fired, "fired", min_len=3)
    same_length(thr, k, "thresholds", "fired")
    n = as_points(trials, "trials")
    if np.ndim(trials) == 0:
        n = np.full(thr.shape, n[0])
    same_length(thr, n, "thresholds", "trials")
    if np.unique(thr).size < 3:
        raise ValueError("thresholds need at least 3 distinct values to fit μ and σ")
    _check_counts(k, n)
    # Work in scaled units so the minimiser sees parameters of order 1.
    centre = float(np.mean(thr))
    scale = float(np.ptp(thr)) or 1.0
    x = (thr - centre) / scale
    mu0, sigma0 = _start(x, k / n)
    res = optimize.minimize(
        _nll, np.array([mu0, np.log(sigma0)]), args=(x, k, n), jac=True, method="BFGS"
    )
    mu_s, sigma_s = float(res.x[0]), float(np.exp(res.x[1]))
    if not np.isfinite(mu_s) or not np.isfinite(sigma_s):
        raise ValueError(f"S-curve fit did not converge: {res.message}")
    try:
        cov = np.linalg.inv(_fisher(mu_s, sigma_s, x, n))
    except np.linalg.LinAlgError as exc:
        raise ValueError("S-curve errors undefined: the scan does not constrain μ and σ") from exc
    if not res.success:
        _check_step_left(res, sigma_s, cov, x, k, n)
    eps = stats.norm.sf(x, mu_s, sigma_s)
    return SCurveFit(
        mu=centre + scale * mu_s,
        sigma=scale * sigma_s,
        mu_err=scale * float(np.sqrt(cov[0, 0])),
        sigma_err=scale * float(np.sqrt(cov[1, 1])),
        chi2_ndf=_deviance(k, n, eps) / (thr.size - 2),
    )


#: A fit BFGS could not finish ("precision loss", common at the optimum of a sharp likelihood) is
#: kept when one Newton step from it would move μ and σ by less than this share of their errors.
STEP_LEFT_LIMIT = 0.01


def _check_step_left(
    res: optimize.OptimizeResult, sigma_s: float, cov: np.ndarray,
    x: np.ndarray, k: np.ndarray, n: np.ndarray,
) -> None:
    """Refuse a fit that stopped short of the maximum: the Newton step cov·∇NLL (in μ, σ) that
    remains must be a small share of the errors, else the values are not the estimate."""
    _, grad = _nll(res.x, x, k, n)
    step = cov @ np.array([grad[0], grad[1] / sigma_s])  # ∂/∂σ = (∂/∂ln σ) / σ
    errors = np.sqrt(np.diag(cov))
    share = np.abs(step) / errors
    if not np.all(np.isfinite(share)) or np.any(share > STEP_LEFT_LIMIT):
        raise ValueError(
            f"S-curve fit did not converge ({res.message}): one more step would move μ and σ by "
            f"{share[0]:.2g} and {share[1]:.2g} of their errors"
        )


def _check_counts(k: np.ndarray, n: np.ndarray) -> None:
    if np.any(n < 1) or np.any(n != np.round(n)):
        raise ValueError("trials must be whole numbers >= 1")
    if np.any(k != np.round(k)) or np.any(k < 0) or np.any(k > n):
        raise ValueError("fired must be whole numbers between 0 and trials")
    inside = int(np.count_nonzero((k > 0) & (k < n)))
    if inside < 2:
        raise ValueError(
            f"only {inside} threshold(s) inside the transition (0 < fired < trials); need 2 to "
            "measure the width: scan with a finer step around the 50 % point"
        )


def _start(x: np.ndarray, frac: np.ndarray) -> tuple[float, float]:
    """μ and σ from the moments of the falling edge: -dε/dx is the Gaussian density."""
    order = np.argsort(x)
    xs, fs = x[order], frac[order]
    if fs[0] <= fs[-1] and np.corrcoef(xs, fs)[0, 1] > 0:
        raise ValueError(
            "efficiency rises with threshold; expected a falling S-curve (fraction fired "
            "decreases as the threshold goes up)"
        )
    drop = -np.diff(fs)
    mid = 0.5 * (xs[1:] + xs[:-1])
    weight = np.clip(drop, 0.0, None)
    total = float(weight.sum()) or 1.0
    mu = float(weight @ mid) / total
    sigma = float(np.sqrt(weight @ (mid - mu) ** 2 / total))
    floor = 0.5 * float(np.min(np.diff(xs)[np.diff(xs) > 0], initial=1.0))
    return mu, max(sigma, floor, 1e-3)


def _log_terms(mu: float, sigma: float, x: np.ndarray) -> tuple[np.ndarray, ...]:
    z = (x - mu) / sigma
    log_eps = special.log_ndtr(-z)  # ln ε, ε = sf(z)
    log_fail = special.log_ndtr(z)  # ln (1 - ε)
    log_pdf = -0.5 * z * z - 0.5 * np.log(2.0 * np.pi)
    return z, log_eps, log_fail, log_pdf


def _nll(params: np.ndarray, x: np.ndarray, k: np.ndarray, n: np.ndarray) -> tuple[float, ...]:
    mu, sigma = float(params[0]), float(np.exp(params[1]))
    z, log_eps, log_fail, log_pdf = _log_terms(mu, sigma, x)
    nll = -float(k @ log_eps + (n - k) @ log_fail)
    # dNLL/dθ = -Σ (k - Nε) φ / (ε(1-ε)) · dz-term; φ/(ε(1-ε)) in logs to survive the tails.
    eps = np.exp(log_eps)
    ratio = np.exp(log_pdf - log_eps - log_fail)
    resid = (k - n * eps) * ratio
    grad = np.array([-float(resid.sum()) / sigma, -float(resid @ z)])
    return nll, grad


def _fisher(mu: float, sigma: float, x: np.ndarray, n: np.ndarray) -> np.ndarray:
    """Expected information of (μ, σ): Σ N (∂ε/∂θ_a)(∂ε/∂θ_b) / (ε(1-ε))."""
    z, log_eps, log_fail, log_pdf = _log_terms(mu, sigma, x)
    w = n * np.exp(2.0 * log_pdf - log_eps - log_fail) / sigma**2
    return np.array([[w.sum(), w @ z], [w @ z, w @ (z * z)]])


def _deviance(k: np.ndarray, n: np.ndarray, eps: np.ndarray) -> float:
    eps = np.clip(eps, 1e-300, 1.0 - 1e-16)
    fired = special.xlogy(k, k / (n * eps))
    missed = special.xlogy(n - k, (n - k) / (n * (1.0 - eps)))
    return 2.0 * float(np.sum(fired + missed))
