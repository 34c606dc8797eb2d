"""SiPM figures from scans: breakdown voltage from gain against bias, its value at a reference
temperature, and the dark-count staircase (rate against threshold) with optical crosstalk.

Definitions (common practice for silicon photomultipliers):
- Gain G = C_cell·(V - V_bd)/e is linear in the bias V; V_bd is the zero-gain intercept of the
  straight-line fit of G(V), the slope is the gain per volt of overvoltage.
- V_bd moves with temperature by a coefficient the sensor's data sheet gives (tens of mV/K);
  V_bd(T_ref) = V_bd(T) - k·(T - T_ref).  The coefficient is an input, never assumed here.
- Dark-count staircase: the rate above a threshold falls in steps at each photoelectron level;
  DCR(0.5 p.e.) counts every dark pulse, DCR(1.5 p.e.) those with at least one crosstalk cell, and
  P_ct ≈ DCR(1.5)/DCR(0.5) (S. Vinogradov, arXiv:1109.2014, branching Poisson: exactly 1 - e^(-λ)
  when pile-up of independent dark pulses is negligible).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, positive, same_length
from .lines import fit_line


@dataclass(frozen=True)
class BreakdownFit:
    """V_bd (V) and the gain slope (gain units per V) of G(V) with one-sigma errors."""

    v_bd: float
    v_bd_err: float
    slope: float
    slope_err: float
    intercept: float
    chi2_ndf: float


def breakdown_voltage(
    bias_V: ArrayLike, gain: ArrayLike, gain_err: ArrayLike | None = None
) -> BreakdownFit:
    """Zero-gain intercept of the straight line G(V) through ``(bias_V, gain)``.

    V_bd = -b/a for G = aV + b; its error propagates the covariance of (a, b):
    σ² = (σ_b² + V_bd² σ_a² + 2 V_bd cov(a, b)) / a².  With ``gain_err`` the fit is weighted
    (Bevington & Robinson §6.4), else the errors come from the scatter.  Refuses a gain that does not
    rise with bias (no breakdown in the scanned range can be located).
    """
    v = as_points(bias_V, "bias_V", min_len=3)
    g = as_points(gain, "gain", min_len=3)
    same_length(v, g, "bias_V", "gain")
    fit = fit_line(v, g, gain_err)
    if fit.slope <= 0.0 or fit.slope < 3.0 * fit.slope_err:
        raise ValueError(
            f"gain does not rise with bias (slope {fit.slope:.4g} ± {fit.slope_err:.2g}): "
            "no breakdown voltage to locate"
        )
    a, b = fit.slope, fit.intercept
    v_bd = -b / a
    var = (fit.intercept_err**2 + v_bd**2 * fit.slope_err**2 + 2.0 * v_bd * fit.covariance) / a**2
    return BreakdownFit(
        v_bd=float(v_bd),
        v_bd_err=float(np.sqrt(max(var, 0.0))),
        slope=float(a),
        slope_err=fit.slope_err,
        intercept=float(b),
        chi2_ndf=fit.chi2_ndf,
    )


def breakdown_at_reference(
    v_bd: float, temperature_C: float, *, reference_C: float, coefficient_mV_per_K: float
) -> float:
    """V_bd referred to ``reference_C``: V_bd - k·(T - T_ref), k in mV/K from the sensor's data."""
    values = (float(v_bd), float(temperature_C), float(reference_C), float(coefficient_mV_per_K))
    if not all(np.isfinite(x) for x in values):
        raise ValueError(f"v_bd, temperatures and coefficient must be finite, got {values}")
    v, t, tref, k = values
    return v - k * 1e-3 * (t - tref)


@dataclass(frozen=True)
class Staircase:
    """Dark-count rates (Hz) at 0.5 and 1.5 photoelectrons and P_ct = DCR(1.5)/DCR(0.5) (a
    fraction, 0..1), each with a one-sigma counting error."""

    dcr_half: float
    dcr_half_err: float
    dcr_three_halves: float
    dcr_three_halves_err: float
    crosstalk: float
    crosstalk_err: float


def dark_count_staircase(
    thresholds_mV: ArrayLike,
    counts: ArrayLike,
    gate_s: float,
    *,
    gain_mV: float,
    baseline_mV: float = 0.0,
) -> Staircase:
    """Rates at 0.5 and 1.5 p.e. from ``counts`` in ``gate_s`` seconds at each threshold.

    Thresholds are referred to the pulse height: level (thr - baseline)/gain in photoelectrons,
    signed by the output's polarity through ``gain_mV`` (negative for a negative-going output).  The
    rate at each level is interpolated in log(rate) between the two nearest thresholds (the staircase
    is flat between steps, so a scan whose points straddle 0.5 and 1.5 p.e. gives the plateau);
    errors are Poisson (√counts) carried through the same interpolation.  Refuses a level outside
    the scan and a zero count at a level used.
    """
    thr = as_points(thresholds_mV, "thresholds_mV", min_len=3)
    n = as_points(counts, "counts", min_len=3)
    same_length(thr, n, "thresholds_mV", "counts")
    if np.any(n < 0) or np.any(n != np.round(n)):
        raise ValueError("counts must be whole numbers >= 0")
    gate = positive(gate_s, "gate_s")
    g = float(gain_mV)
    if not np.isfinite(g) or g == 0.0:
        raise ValueError(f"gain_mV must be finite and non-zero, got {gain_mV!r}")
    level = (thr - float(baseline_mV)) / g
    order = np.argsort(level)
    level, n = level[order], n[order]
    half, half_var = _rate_at(level, n, 0.5, gate)
    three, three_var = _rate_at(level, n, 1.5, gate)
    ratio = three / half
    rel = np.sqrt(half_var / half**2 + three_var / three**2)
    return Staircase(
        dcr_half=half,
        dcr_half_err=float(np.sqrt(half_var)),
        dcr_three_halves=three,
        dcr_three_halves_err=float(np.sqrt(three_var)),
        crosstalk=float(ratio),
        crosstalk_err=float(ratio * rel),
    )


def _rate_at(level: np.ndarray, n: np.ndarray, at: float, gate: float) -> tuple[float, float]:
    if at < level[0] or at > level[-1]:
        raise ValueError(
            f"the scan covers {level[0]:.2f} to {level[-1]:.2f} p.e.; {at} p.e. is outside it"
        )
    hi = int(np.searchsorted(level, at))
    lo = max(hi - 1, 0)
    hi = min(hi, level.size - 1)
    if n[lo] <= 0 or n[hi] <= 0:
        raise ValueError(f"no counts next to {at} p.e.: lengthen the gate")
    w = 0.0 if level[hi] == level[lo] else (at - level[lo]) / (level[hi] - level[lo])
    log_rate = (1.0 - w) * np.log(n[lo]) + w * np.log(n[hi])
    rate = float(np.exp(log_rate)) / gate
    rel_var = (1.0 - w) ** 2 / n[lo] + w**2 / n[hi]
    return rate, rate**2 * float(rel_var)
