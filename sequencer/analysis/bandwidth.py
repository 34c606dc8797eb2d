"""Effective (analogue) bandwidth of a digitizer input from the amplitude of fitted sines.

The input is driven with sines of one generator amplitude at several frequencies; each record's
amplitude comes from a sine fit (:mod:`sequencer.analysis.sinefit`).  The gain at a frequency is
that amplitude over the amplitude at the lowest frequency scanned (the reference), in dB; the
bandwidth is the lowest frequency where the gain falls to −3.0103 dB (1/√2, half power: the usual
analogue bandwidth of a digitizer, IEEE Std 1241 terms, clause from memory), interpolated linearly in
(log₁₀ f, dB) between the two frequencies that bracket it.

Sines above half the sample rate alias: :func:`aliased_frequency` gives the frequency at which the
record shows them (the fit's starting point); the amplitude is unchanged by aliasing.

Refusals: a gain that never falls to −3 dB over the scan gives NaN with the reason ("above the
highest frequency scanned"), never the highest frequency as if it were the bandwidth.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, positive, same_length

#: −3 dB exactly: 20·log₁₀(1/√2).
HALF_POWER_DB = 20.0 * math.log10(1.0 / math.sqrt(2.0))


@dataclass(frozen=True, kw_only=True)
class Bandwidth:
    """The −3 dB frequency (Hz; NaN with ``reason`` when not reached) and the gain curve."""

    frequency_3db_hz: float
    frequencies_hz: np.ndarray
    gain_db: np.ndarray  # amplitude / amplitude at the lowest frequency, dB
    reason: str = ""


def aliased_frequency(frequency_hz: float, sample_rate_hz: float) -> float:
    """The frequency (0 .. fs/2) at which a sine of ``frequency_hz`` appears sampled at ``fs``."""
    f = positive(frequency_hz, "frequency_hz")
    fs = positive(sample_rate_hz, "sample_rate_hz")
    return abs(f - fs * round(f / fs))


def effective_bandwidth(frequencies_hz: ArrayLike, amplitudes: ArrayLike) -> Bandwidth:
    """The −3 dB frequency of the amplitudes of one input's sines (module docstring)."""
    f = as_points(frequencies_hz, "frequencies_hz", min_len=2)
    a = as_points(amplitudes, "amplitudes", min_len=2)
    same_length(f, a, "frequencies_hz", "amplitudes")
    if np.any(f <= 0) or np.any(a <= 0):
        raise ValueError("frequencies_hz and amplitudes must be > 0")
    order = np.argsort(f, kind="stable")
    f, a = f[order], a[order]
    if np.any(np.diff(f) == 0):
        raise ValueError("frequencies_hz has a frequency twice: one amplitude per frequency")
    gain = 20.0 * np.log10(a / a[0])
    below = np.flatnonzero(gain <= HALF_POWER_DB)
    if below.size == 0:
        return Bandwidth(
            frequency_3db_hz=math.nan,
            frequencies_hz=f,
            gain_db=gain,
            reason=(
                f"the gain stays above -3 dB up to the highest frequency scanned "
                f"({f[-1] / 1e6:.6g} MHz, {gain[-1]:.2f} dB): the bandwidth is above it"
            ),
        )
    k = int(below[0])  # k >= 1: the reference is 0 dB
    x0, x1 = math.log10(f[k - 1]), math.log10(f[k])
    g0, g1 = float(gain[k - 1]), float(gain[k])
    x = x1 if g1 == g0 else x0 + (HALF_POWER_DB - g0) * (x1 - x0) / (g1 - g0)
    return Bandwidth(frequency_3db_hz=10.0**x, frequencies_hz=f, gain_db=gain)
