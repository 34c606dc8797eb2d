"""Pulse shapes, noise and discriminator statistics of the simulated board: pure, vectorised numpy.

Conventions (times in ns, voltages in mV, t = 0 where the pulse starts):

* **Fast preamp pulse** ``p(t) = (e^(-t/τd) - e^(-t/τr)) / peak`` for t >= 0, unit height.
  ``τd`` is the board's ``pulse.decay_ns``; ``τr`` is solved so that the 10-90 % rise time of p is
  exactly ``pulse.rise_ns`` (:func:`fast_time_constants`).
* **Unipolar shaper CR-RCⁿ** ``h(x) = xⁿ e⁻ˣ / n!`` with x = t/τ (n = ``shaper.order``: one CR
  differentiator and n RC integrators), peaking at n·τ; returned scaled to unit peak.
* **Bipolar shaper CR²-RCⁿ** ``h(x) = (xⁿ e⁻ˣ / n!)(1 - x/(n+1))``: zero crossing at (n+1)·τ,
  positive peak at (n+1-√(n+1))·τ; scaled to a unit positive peak.  Both as in Spieler 2005 ch. 4
  (REFERENCES.md).  The shaper responds to the injected charge (a step into the charge-sensitive
  preamp), so its timing does not depend on the fast pulse's decay.
* **Noise** is white noise through a single-pole low-pass of time constant τ (the preamp's
  bandwidth: τ = τr for the fast outputs, τ = shaper τ for the shaped output), generated exactly at
  the sample interval as a stationary AR(1) process ``y[i] = a·y[i-1] + √(1-a²)·w[i]``, a = e^(-dt/τ).
  Its RMS per sample is exactly the requested value, whatever the sample rate.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq
from scipy.signal import lfilter
from scipy.special import erfc


def _fast_peak(tau_r: float, tau_d: float) -> tuple[float, float]:
    """Time of the peak of e^(-t/τd) - e^(-t/τr) and its value."""
    t_peak = tau_r * tau_d / (tau_d - tau_r) * math.log(tau_d / tau_r)
    return t_peak, math.exp(-t_peak / tau_d) - math.exp(-t_peak / tau_r)


def fast_rise_time(tau_r: float, tau_d: float) -> float:
    """10-90 % rise time (ns) of the unit fast pulse with time constants τr < τd."""
    t_peak, peak = _fast_peak(tau_r, tau_d)

    def level(t: float, frac: float) -> float:
        return (math.exp(-t / tau_d) - math.exp(-t / tau_r)) / peak - frac

    t10 = brentq(level, 0.0, t_peak, args=(0.1,), xtol=1e-12)
    t90 = brentq(level, 0.0, t_peak, args=(0.9,), xtol=1e-12)
    return t90 - t10


def fast_time_constants(rise_ns: float, decay_ns: float) -> tuple[float, float]:
    """(τr, τd) of the fast pulse whose 10-90 % rise is ``rise_ns`` and decay constant ``decay_ns``.

    Raises ``ValueError`` when the rise is too slow for that decay (τr would reach τd).
    """
    if rise_ns <= 0 or decay_ns <= 0:
        raise ValueError("rise and decay must be positive")
    lo, hi = rise_ns * 1e-4, decay_ns * 0.999
    slowest = fast_rise_time(hi, decay_ns)
    if rise_ns >= slowest:
        raise ValueError(
            f"a {rise_ns:g} ns rise needs a decay longer than {decay_ns:g} ns "
            f"(at most {slowest:.3g} ns rise for this decay)"
        )
    tau_r = brentq(lambda tr: fast_rise_time(tr, decay_ns) - rise_ns, lo, hi, xtol=1e-12)
    return tau_r, decay_ns


def fast_pulse(t_ns: np.ndarray, tau_r: float, tau_d: float) -> np.ndarray:
    """Unit-height fast preamp pulse at times ``t_ns`` (0 before t = 0)."""
    t = np.asarray(t_ns, dtype=float)
    _, peak = _fast_peak(tau_r, tau_d)
    tp = np.maximum(t, 0.0)
    return np.where(t > 0, (np.exp(-tp / tau_d) - np.exp(-tp / tau_r)) / peak, 0.0)


def shaper_response(x: np.ndarray | float, order: int, kind: str) -> np.ndarray:
    """Raw CR-RCⁿ (``unipolar``) or CR²-RCⁿ (``bipolar``) response at x = t/τ (REFERENCES.md)."""
    xs = np.maximum(np.asarray(x, dtype=float), 0.0)
    v = xs**order * np.exp(-xs) / math.factorial(order)
    if kind == "bipolar":
        v = v * (1.0 - xs / (order + 1))
    return v


def shaped_pulse(t_ns: np.ndarray, order: int, tau_ns: float, kind: str) -> np.ndarray:
    """Shaper output at times ``t_ns``, scaled to a unit (positive) peak."""
    x_peak = order + 1 - math.sqrt(order + 1) if kind == "bipolar" else float(order)
    peak = float(shaper_response(x_peak, order, kind))
    return shaper_response(np.asarray(t_ns, dtype=float) / tau_ns, order, kind) / peak


def compressed_height(amplitude_mV: float, gain: float, saturation_mV: float) -> float:
    """Pulse height S·tanh(g·A/S) of DESIGN.md (soft saturation at S = ``saturation_mV``)."""
    return saturation_mV * math.tanh(gain * amplitude_mV / saturation_mV)


def band_limited_noise(
    rng: np.random.Generator, rows: int, points: int, dt_ns: float, tau_ns: float
) -> np.ndarray:
    """``rows`` x ``points`` stationary unit-RMS noise, white through a one-pole low-pass of τ."""
    w = rng.standard_normal((rows, points))
    if tau_ns <= 0 or points < 2:
        return w
    a = math.exp(-dt_ns / tau_ns)
    x = w * math.sqrt(1.0 - a * a)
    x[:, 0] = w[:, 0]  # start in the stationary state
    return lfilter([1.0], [1.0, -a], x, axis=-1)


def firing_probability(height_mV: float, threshold_mV: float, sigma_mV: float) -> float:
    """P(height + Gaussian noise of RMS σ > threshold) = ½·erfc((thr - h)/(√2·σ)) (REFERENCES.md)."""
    if sigma_mV <= 0:
        return 1.0 if height_mV > threshold_mV else 0.0
    return float(0.5 * erfc((threshold_mV - height_mV) / (math.sqrt(2.0) * sigma_mV)))


def rice_rate_hz(threshold_mV: float, sigma_mV: float, tau_ns: float) -> float:
    """Noise firing rate ν(u) = ν₀·exp(-u²/2σ²), ν₀ = √3/(2πτ) for CR-RC² (Rice 1944, REFERENCES.md).

    A threshold at or below the baseline fires at the full rate ν₀.
    """
    nu0 = math.sqrt(3.0) / (2.0 * math.pi * tau_ns * 1e-9)
    if threshold_mV <= 0:
        return nu0
    if sigma_mV <= 0:
        return 0.0
    return nu0 * math.exp(-(threshold_mV**2) / (2.0 * sigma_mV**2))
