"""Threshold calibration from several S-curves, and the noise firing rate against threshold."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, positive
from .lines import LineFit, fit_line


@dataclass(frozen=True, eq=False)
class ThresholdCalibration:
    """50 % threshold against pulse height at the discriminator: ``mu = slope · height + offset``.

    ``offset_mV`` is the ``discriminator_offset_mV`` quantity (50 % threshold minus pulse height,
    the intercept); ``slope`` is 1 for a discriminator that compares the height itself.
    """

    slope: float
    offset_mV: float
    offset_err: float
    slope_err: float
    chi2_ndf: float
    fit: LineFit


def threshold_calibration(
    heights_mV: ArrayLike,
    mu_mV: ArrayLike,
    mu_err: ArrayLike | None = None,
) -> ThresholdCalibration:
    """Line through the S-curve 50 % points ``mu_mV`` against the pulse heights ``heights_mV`` at
    the discriminator (one S-curve per injected amplitude, at least 3).

    With ``mu_err`` (the fits' ``mu_err``) the line is weighted and its errors come from those;
    without, from the scatter (see :func:`~sequencer.analysis.lines.fit_line`).
    """
    fit = fit_line(heights_mV, mu_mV, mu_err)
    return ThresholdCalibration(
        slope=fit.slope,
        offset_mV=fit.intercept,
        offset_err=fit.intercept_err,
        slope_err=fit.slope_err,
        chi2_ndf=fit.chi2_ndf,
        fit=fit,
    )


def noise_rate(
    threshold_mV: ArrayLike,
    sigma_mV: float,
    nu0_hz: float,
) -> float | np.ndarray:
    """Rate (Hz) at which Gaussian noise of RMS ``sigma_mV`` crosses ``threshold_mV`` upward.

    Rice's formula ν(u) = ν₀ exp(-u²/2σ²), u the threshold above the baseline and ν₀ the rate of
    upward zero crossings (S. O. Rice, Bell Syst. Tech. J. 23 (1944) 282; 24 (1945) 46).  A scalar
    threshold gives a float, an array one rate per threshold.
    """
    sigma = positive(sigma_mV, "sigma_mV")
    nu0 = positive(nu0_hz, "nu0_hz")
    u = as_points(threshold_mV, "threshold_mV")
    rate = nu0 * np.exp(-0.5 * (u / sigma) ** 2)
    return float(rate[0]) if np.ndim(threshold_mV) == 0 else rate


def rice_nu0(tau_ns: float, order: int) -> float:
    """Upward zero-crossing rate ν₀ (Hz) of white noise after a CR-RCⁿ shaper of time constant τ.

    ν₀ = (1/2π) √(∫ω²|H|²dω / ∫|H|²dω) with |H(ω)|² = (ωτ)²/(1 + (ωτ)²)^(n+1); both integrals are
    Beta functions and the ratio is 3/((2n - 3) τ²), so ν₀ = √(3/(2n - 3)) / (2πτ): √3/(2πτ) for
    n = 2 and √(3/5)/(2πτ) for n = 4 (Rice, as above).  The integral diverges for n = 1.
    """
    tau_s = positive(tau_ns, "tau_ns") * 1e-9
    if isinstance(order, bool) or not isinstance(order, int | np.integer) or order < 2:
        raise ValueError(
            f"order must be an integer >= 2 (CR-RC¹ passes unbounded white-noise bandwidth), "
            f"got {order!r}"
        )
    return float(np.sqrt(3.0 / (2 * int(order) - 3)) / (2.0 * np.pi * tau_s))
