"""Quantisation, clipping and averaging of the simulated digitizer (pure numpy).

Codes are int16 in units of ``full_scale / 65536`` around the input's offset (``FORMat:DATA
INTeger,16``): an ADC of ``bits`` bits gives single acquisitions in steps of ``2**(16 - bits)`` codes,
clipped at the range (offset ± full_scale / 2).  The average of N acquisitions is computed directly,
not by looping N times:

* the expected value of one quantised acquisition of x + n (n Gaussian, RMS σ, step q) is
  ``x - Σ_m (-1)^(m+1) q/(πm) · sin(2πm x/q) · exp(-2π²m²σ²/q²)`` (the Fourier series of the rounding
  error averaged over the noise): with σ ≳ q/2 the noise dithers the quantiser and the average
  resolves below one step; with σ ≪ q the average stays on the quantised value;
* the noise of the average is that of one acquisition divided by √N (the band-limited part keeps its
  spectrum), plus quantisation noise q²/12 (Sheppard), damped by (1 - exp(-2π²σ²/q²)) when the noise
  is too small to dither, also divided by N in variance;
* the result is clipped to the ADC range (an approximation near the rails, where real clipped noise
  would also bias the mean) and rounded to the 16-bit code.
"""

from __future__ import annotations

import math

import numpy as np

CODES_16 = 65536


def _expected_codes(u: np.ndarray, s: float) -> np.ndarray:
    """E[round(u + s·w)] for w standard normal, u in ADC steps, s = σ/q."""
    if s < 0.05:
        return np.rint(u)
    if s > 0.85:
        return u
    terms = min(16, math.ceil(0.7 / s))
    out = u.copy()
    for m in range(1, terms + 1):
        sign = 1.0 if m % 2 else -1.0
        out -= (
            sign
            / (math.pi * m)
            * math.exp(-2.0 * math.pi**2 * m * m * s * s)
            * np.sin(2.0 * math.pi * m * u)
        )
    return out


def digitize(
    volts: np.ndarray,
    noise: np.ndarray,
    sigma_V: np.ndarray,
    *,
    averages: int,
    full_scale_V: np.ndarray,
    offset_V: np.ndarray,
    bits: int,
    rng: np.random.Generator,
) -> np.ndarray:
    """int16 codes of the average of ``averages`` acquisitions, one row per input.

    ``volts`` is the noise-free input, ``noise`` a unit-RMS noise realisation of the same shape and
    ``sigma_V`` the RMS (V) of one acquisition's noise per row.
    """
    q = (np.asarray(full_scale_V, dtype=float) / 2**bits)[:, None]
    u = (volts - np.asarray(offset_V, dtype=float)[:, None]) / q
    s = np.asarray(sigma_V, dtype=float)[:, None] / q
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    shift = 2 ** (16 - bits)
    if averages <= 1:
        return (np.clip(np.rint(u + noise * s), lo, hi) * shift).astype(np.int16)
    root_n = math.sqrt(averages)
    mean = np.vstack([_expected_codes(u[i], float(s[i, 0])) for i in range(u.shape[0])])
    quant_var = (1.0 - np.exp(-2.0 * math.pi**2 * s * s)) / 12.0
    mean += noise * s / root_n + rng.standard_normal(u.shape) * np.sqrt(quant_var / averages)
    return np.clip(np.rint(np.clip(mean, lo, hi) * shift), lo * shift, hi * shift).astype(np.int16)
