"""Logic pulses: the duration of each captured logic pulse between its 50 % crossings.

Duration (IEEE Std 181-2011 "pulse duration", clause from memory): the time between the first rising
crossing of the 50 % reference level and the next falling crossing, each linearly interpolated
between samples; the level is given (half the logic swing above the baseline, the mean of the first
``n_baseline`` samples).  NaN for a trace with no complete pulse (no rise, or no fall in the record).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, per_row, positive


def _cross(x: np.ndarray, k: int) -> float:
    """Fractional index where ``x`` crosses 0 between samples k − 1 and k."""
    return (k - 1) + x[k - 1] / (x[k - 1] - x[k])


def pulse_duration(
    traces: ArrayLike, dt_ns: float, level_mV: float, *, n_baseline: int = 0
) -> float | np.ndarray:
    """Duration (ns) of the first logic pulse of each trace at ``level_mV`` above its baseline."""
    arr, one = as_traces(traces)
    dt = positive(dt_ns, "dt_ns")
    level = positive(level_mV, "level_mV")
    base = arr[:, :n_baseline].mean(axis=1, keepdims=True) if n_baseline > 0 else 0.0
    out = np.full(arr.shape[0], np.nan)
    for i, x in enumerate(arr - base - level):
        up = np.flatnonzero((x[1:] >= 0) & (x[:-1] < 0))
        if up.size == 0:
            continue
        k1 = int(up[0]) + 1
        down = np.flatnonzero((x[k1 + 1 :] < 0) & (x[k1:-1] >= 0))
        if down.size == 0:
            continue
        k2 = k1 + int(down[0]) + 1
        out[i] = (_cross(x, k2) - _cross(x, k1)) * dt
    return per_row(out, one)
