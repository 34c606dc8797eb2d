"""Shaper to slow ADC: the unipolar CR-RCⁿ pulse, how many slow samples land on it, and its amplitude
reconstructed from those few samples.

Shape (REFERENCES.md "Shaping amplifiers"; Spieler 2005 ch. 4): a step of charge gives
v(x) = xⁿe⁻ˣ/n!, x = (t − t_start)/τ, peak nⁿe⁻ⁿ/n! at x = n.  Here it is scaled to a unit peak,
h(x) = (x/n)ⁿ·e^(n − x), so a fitted amplitude is the pulse's peak height.

Reconstruction from samples of period T (the slow ADC, not locked to the pulse):

* ``"shape"``: least squares of A·h((t − t_start)/τ) with n and τ known; A is linear (solved for each
  t_start) and t_start is found by a bounded scalar search -- unbiased without noise;
* ``"parabola"``: the vertex of the parabola through the largest sample and its two neighbours -- no
  shape needed, biased low when T is not small against the peak's curvature.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.optimize import brentq, minimize_scalar

from ._checks import as_points, positive, same_length

METHODS = ("shape", "parabola")


def _order(order: int) -> int:
    if isinstance(order, bool) or not isinstance(order, int | np.integer) or not 1 <= order <= 10:
        raise ValueError(f"order must be an integer 1..10, got {order!r}")
    return int(order)


def crrc_unit(x: ArrayLike, order: int) -> np.ndarray:
    """Unit-peak unipolar CR-RCⁿ pulse h(x) = (x/n)ⁿ·e^(n − x) for x >= 0, 0 before."""
    n = _order(order)
    xx = np.clip(np.asarray(x, dtype=float), 0.0, None)
    return (xx / n) ** n * np.exp(n - xx)


def crrc_fwhm_tau(order: int) -> float:
    """Full width at half maximum of the unipolar CR-RCⁿ pulse, in units of τ (numerical)."""
    n = _order(order)

    def half(x: float) -> float:
        return float(crrc_unit(x, n)) - 0.5

    return brentq(half, n, 10 * n + 10) - brentq(half, 1e-9, n)


def samples_above_half(order: int, tau_ns: float, period_ns: float) -> float:
    """Mean number of samples of period ``period_ns`` above half height: FWHM / T."""
    return crrc_fwhm_tau(order) * positive(tau_ns, "tau_ns") / positive(period_ns, "period_ns")


@dataclass(frozen=True, kw_only=True)
class Reconstruction:
    """Amplitude (the peak height, mV) and peak time (ns) reconstructed from slow samples."""

    amplitude_mV: float
    peak_time_ns: float
    method: str
    samples: int


def reconstruct_amplitude(
    t_ns: ArrayLike, samples_mV: ArrayLike, *, order: int, tau_ns: float, method: str = "shape"
) -> Reconstruction:
    """Peak height of a unipolar CR-RCⁿ pulse from its samples (baseline already removed)."""
    t = as_points(t_ns, "t_ns", min_len=3)
    y = as_points(samples_mV, "samples_mV", min_len=3)
    same_length(t, y, "t_ns", "samples_mV")
    n = _order(order)
    tau = positive(tau_ns, "tau_ns")
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    k = int(np.argmax(y))
    if y[k] <= 0:
        raise ValueError("no positive pulse among the samples")
    if k == 0 or k == y.size - 1:
        raise ValueError("the largest sample is at an end of the record: the peak is not bracketed")
    if method == "parabola":
        return _parabola(t, y, k, n, tau)
    return _shape(t, y, k, n, tau)


def _parabola(t: np.ndarray, y: np.ndarray, k: int, n: int, tau: float) -> Reconstruction:
    a, b, c = y[k - 1], y[k], y[k + 1]
    denom = a - 2 * b + c
    if denom >= 0:
        raise ValueError("the three top samples are not concave: no vertex to take")
    shift = 0.5 * (a - c) / denom  # in samples, within (-0.5, 0.5) for a concave top
    step = 0.5 * (t[k + 1] - t[k - 1])
    return Reconstruction(
        amplitude_mV=float(b - 0.25 * (a - c) * shift),
        peak_time_ns=float(t[k] + shift * step),
        method="parabola",
        samples=3,
    )


def _shape(t: np.ndarray, y: np.ndarray, k: int, n: int, tau: float) -> Reconstruction:
    def amplitude(start: float) -> tuple[float, float]:
        h = crrc_unit((t - start) / tau, n)
        hh = float(h @ h)
        if hh == 0:
            return 0.0, float(y @ y)
        a = float(h @ y) / hh
        r = y - a * h
        return a, float(r @ r)

    centre = t[k] - n * tau  # the start that puts the peak on the largest sample
    span = max(float(t[min(k + 1, t.size - 1)] - t[k - 1]), 1e-9 * tau)
    found = minimize_scalar(
        lambda s: amplitude(s)[1],
        bounds=(centre - span, centre + span),
        method="bounded",
        options={"xatol": 1e-7 * tau},
    )
    a, _ = amplitude(float(found.x))
    if not math.isfinite(a) or a <= 0:
        raise ValueError("the shape fit found no positive pulse")
    return Reconstruction(
        amplitude_mV=a, peak_time_ns=float(found.x + n * tau), method="shape", samples=int(t.size)
    )
