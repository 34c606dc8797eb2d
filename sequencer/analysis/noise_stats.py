"""How well an RMS is known from correlated samples, and noise captures taken until it is known well enough.

The RMS ``s`` of ν degrees of freedom of Gaussian noise has a relative standard uncertainty of
about ``1/sqrt(2ν)``: ``ν s²/σ²`` is chi-square distributed with ν degrees of freedom, whose variance
is 2ν (GUM, JCGM 100:2008 Annex E.4.3, eq. E.7: σ[s]/σ ≈ [2(n − 1)]^(-1/2) for n independent
observations and their mean).

Samples of band-limited noise are not independent: a scope sampling faster than the front end's
bandwidth takes many samples per correlation time.  For a stationary Gaussian process the variance
of the sample variance is ``(2σ⁴/n) Σ_k ρ_k²`` over all lags k (Bartlett 1946, "On the theoretical
specification and sampling properties of autocorrelated time-series", J. R. Stat. Soc. Suppl. 8,
27-41; also Priestley 1981, Spectral Analysis and Time Series, §5.3), so the record counts as

    n_eff = n / (1 + 2 Σ_{k≥1} ρ_k²)

independent samples.  ``ρ_k`` is estimated from the record itself (mean of the rows' sample
autocorrelations) and summed while it stays above ``2/sqrt(N)`` of all N samples -- about twice
the standard error of an estimated autocorrelation at large lags (Bartlett's formula; the two
standard errors are common practice); past that the estimates are noise and squaring them would
only add bias.  White noise gives n_eff ≈ n; one-pole noise with ρ_k = a^k gives
n (1 − a²)/(1 + a²).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import positive


@dataclass(frozen=True)
class RmsPrecision:
    """What a set of noise records says about their RMS."""

    samples: int  # all samples of all rows
    effective: float  # n_eff summed over the rows
    dof: float  # degrees of freedom: n_eff less one mean per row
    relative_uncertainty: float  # 1 / sqrt(2 dof)


def autocorrelation(rows: ArrayLike, max_lag: int) -> np.ndarray:
    """ρ_0..ρ_max_lag: the rows' biased sample autocovariances (each row's own mean removed),
    averaged over the rows, over their variance."""
    arr = np.atleast_2d(np.asarray(rows, dtype=np.float64))
    n = arr.shape[1]
    lags = max(0, min(int(max_lag), n - 1))
    x = arr - arr.mean(axis=1, keepdims=True)
    size = 1 << int(2 * n - 1).bit_length()  # zero-padded: linear, not circular, correlation
    spectrum = np.fft.rfft(x, size, axis=1)
    acov = np.fft.irfft(spectrum * np.conj(spectrum), size, axis=1)[:, : lags + 1].mean(axis=0)
    if not acov[0] > 0.0:
        raise ValueError("the records are flat: no noise to measure")
    return acov / acov[0]


def rms_precision(rows: ArrayLike) -> RmsPrecision:
    """The effective sample count and the relative standard uncertainty of the RMS of ``rows``
    (one record a row, each about its own mean), after the module docstring."""
    arr = np.atleast_2d(np.asarray(rows, dtype=np.float64))
    m, n = arr.shape
    if n < 3 or not np.all(np.isfinite(arr)):
        raise ValueError("rms_precision needs finite records of at least 3 samples")
    rho = autocorrelation(arr, max(1, n // 4))
    significant = 2.0 / math.sqrt(m * n)
    below = np.nonzero(rho[1:] < significant)[0]
    last = int(below[0]) if below.size else len(rho) - 1  # lags 1..last are summed
    factor = 1.0 + 2.0 * float(np.sum(rho[1 : last + 1] ** 2))
    effective = m * n / factor
    dof = max(effective - m, 1.0)
    return RmsPrecision(samples=m * n, effective=effective, dof=dof,
                        relative_uncertainty=1.0 / math.sqrt(2.0 * dof))  # fmt: skip


@dataclass
class RmsToTarget:
    """Noise records taken until their RMS has a relative standard uncertainty at or below
    ``target`` (a fraction: 0.02 = 2 %), at least ``min_count`` and at most ``max_count`` of them.
    :attr:`stopped` says why no more are wanted ("" while more are)."""

    target: float
    min_count: int = 1
    max_count: int = 8
    precision: RmsPrecision | None = None
    count: int = 0
    stopped: str = ""

    def __post_init__(self) -> None:
        positive(self.target, "target")
        if self.min_count < 1 or self.max_count < self.min_count:
            raise ValueError(
                f"captures from {self.min_count} to {self.max_count}: need 1 <= min <= max"
            )

    @property
    def reached(self) -> bool:
        p = self.precision
        enough = p is not None and p.relative_uncertainty <= self.target
        return enough and self.count >= self.min_count

    def replace_all(self, rows: ArrayLike) -> None:
        """Judge every record taken so far (one a row)."""
        arr = np.atleast_2d(np.asarray(rows, dtype=np.float64))
        self.count = arr.shape[0]
        try:
            self.precision = rms_precision(arr)
        except ValueError as exc:
            self.precision = None
            self.stopped = f"the noise could not be measured: {exc}"
            return
        if self.reached:
            self.stopped = "target uncertainty reached"
        elif self.count >= self.max_count:
            self.stopped = "capture budget spent"
        else:
            self.stopped = ""
