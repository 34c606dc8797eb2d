"""Coincidence units: accidental rate, the delay curve (resolving time and plateau), efficiency.

Convention: a coincidence is two input pulses closer in time than the resolving time τ
(|t₂ - t₁| < τ).  Then

* two independent random trains of rates R₁, R₂ give accidentals at R_acc = 2τR₁R₂ (standard, e.g.
  Leo, *Techniques for Nuclear and Particle Physics Experiments*, from memory; REFERENCES.md);
* the delay curve -- the coincidence rate of a correlated pair of trains against the delay of one
  input -- is a rectangle 2τ wide (smeared by timing jitter at its edges, which leaves the
  half-maximum points in place), so τ = FWHM / 2.  Texts that call the full width the resolving time
  use 2τ: state which when comparing.

Times in ns, rates in Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, positive, same_length

#: Fewest scan points a delay curve needs (two outside each edge and one on the plateau).
MIN_DELAY_POINTS = 5


def accidental_rate_hz(resolving_time_ns: float, rate1_hz: float, rate2_hz: float) -> float:
    """R_acc = 2τR₁R₂ (Hz) for independent random trains of rates R₁, R₂ and resolving time τ."""
    tau = positive(resolving_time_ns, "resolving_time_ns")
    r1, r2 = (_rate(r, name) for r, name in ((rate1_hz, "rate1_hz"), (rate2_hz, "rate2_hz")))
    return 2.0 * tau * 1e-9 * r1 * r2


def _rate(value: float, name: str) -> float:
    v = float(value)
    if not math.isfinite(v) or v < 0:
        raise ValueError(f"{name} must be a finite rate >= 0 Hz, got {value!r}")
    return v


@dataclass(frozen=True, kw_only=True)
class DelayCurve:
    """What a delay curve gives: edges, FWHM, τ = FWHM/2, plateau and background (ns, Hz)."""

    left_ns: float
    right_ns: float
    fwhm_ns: float
    resolving_time_ns: float
    centre_ns: float
    plateau_hz: float
    plateau_uncertainty_hz: float
    plateau_points: int
    background_hz: float


def fit_delay_curve(delay_ns: ArrayLike, rate_hz: ArrayLike) -> DelayCurve:
    """Resolving time and plateau from a delay scan (coincidence rate vs delay of one input).

    Background: the mean of the first and last point (the scan must start and end off the curve).
    Half maximum: background + (plateau - background)/2, with the edges found by linear interpolation
    between the scan points that straddle it, first from the peak's maximum, then once more from
    the plateau = mean rate of the points within FWHM/4 of the centre (its uncertainty the standard
    error of those points).  Raises ``ValueError`` when the scan does not show both edges.
    """
    d = as_points(delay_ns, "delay_ns", min_len=MIN_DELAY_POINTS)
    r = as_points(rate_hz, "rate_hz", min_len=MIN_DELAY_POINTS)
    same_length(d, r, "delay_ns", "rate_hz")
    if np.any(r < 0):
        raise ValueError("rate_hz must be >= 0")
    order = np.argsort(d, kind="stable")
    d, r = d[order], r[order]
    if np.any(np.diff(d) == 0):
        raise ValueError("delay_ns has repeated delays: one rate per delay")
    background = 0.5 * (r[0] + r[-1])
    peak = float(r.max())
    if peak <= background:
        raise ValueError("the delay curve has no peak above its ends: no coincidences to time")
    left, right = _edges(d, r, background + 0.5 * (peak - background))
    centre = 0.5 * (left + right)
    inside = np.abs(d - centre) <= 0.25 * (right - left)
    if not inside.any():
        inside = r == peak
    plateau = float(r[inside].mean())
    left, right = _edges(d, r, background + 0.5 * (plateau - background))
    n = int(inside.sum())
    spread = float(r[inside].std(ddof=1)) / math.sqrt(n) if n > 1 else math.nan
    fwhm = right - left
    return DelayCurve(
        left_ns=left,
        right_ns=right,
        fwhm_ns=fwhm,
        resolving_time_ns=0.5 * fwhm,
        centre_ns=0.5 * (left + right),
        plateau_hz=plateau,
        plateau_uncertainty_hz=spread,
        plateau_points=n,
        background_hz=float(background),
    )


def _edges(d: np.ndarray, r: np.ndarray, half: float) -> tuple[float, float]:
    """The outermost half-maximum crossings, linearly interpolated."""
    above = np.flatnonzero(r >= half)
    first, last = int(above[0]), int(above[-1])
    if first == 0:
        raise ValueError(
            f"the delay scan starts above half maximum (at {d[0]:g} ns): extend it to earlier delays"
        )
    if last == d.size - 1:
        raise ValueError(
            f"the delay scan ends above half maximum (at {d[-1]:g} ns): extend it to later delays"
        )
    left = _cross(d[first - 1], r[first - 1], d[first], r[first], half)
    right = _cross(d[last], r[last], d[last + 1], r[last + 1], half)
    return left, right


def _cross(x0: float, y0: float, x1: float, y1: float, level: float) -> float:
    return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0))


@dataclass(frozen=True, kw_only=True)
class Efficiency:
    """A binomial efficiency and its uncertainty √(ε(1-ε)/N)."""

    value: float
    uncertainty: float


def coincidence_efficiency(coincidences: int, trials: int) -> Efficiency:
    """Coincidences per correlated event sent (e.g. pulser pulses) with the binomial uncertainty.

    At ε = 0 or 1 the binomial σ is 0; the uncertainty then uses (k+1)/(N+2) instead (Ullrich & Xu,
    BNL 2003, arXiv:physics/0701199; REFERENCES.md "fit weights").
    """
    k, n = int(coincidences), int(trials)
    if n <= 0:
        raise ValueError(f"trials must be > 0, got {trials!r}")
    if not 0 <= k <= n:
        raise ValueError(f"coincidences must be within 0..trials ({n}), got {coincidences!r}")
    eps = k / n
    p = eps if 0 < k < n else (k + 1) / (n + 2)
    return Efficiency(value=eps, uncertainty=math.sqrt(p * (1 - p) / n))
