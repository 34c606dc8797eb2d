"""Pulse timing: rise time, peaking time and the zero crossing of bipolar pulses (ns).

Time convention: sample ``i`` of a trace sits at ``t = i * dt_ns`` in the trace's own time axis;
``t0_ns`` (the pulse start, e.g. the injection instant) is given on that same axis.  Pulses are
positive-going; 1-D input gives a float, 2-D input one value per row.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, finite_rows, n_baseline_for, per_row, positive
from .pulses import baseline_means, peak_values, sample_at


def rise_time(
    traces: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    low: float = 0.1,
    high: float = 0.9,
) -> float | np.ndarray:
    """Time (ns) from the ``low`` to the ``high`` reference level of the leading edge.

    IEEE Std 181-2011 reference levels (clause 5.3, from memory): level x = base + x · height, with
    base the mean of the first ``n_baseline`` samples and height the parabola-refined peak above it
    (:func:`~sequencer.analysis.pulses.pulse_height`, ``method="peak"``).  Each crossing is the last
    upward crossing before the peak, linearly interpolated between samples.  An edge already above
    a level at the first sample is timed from t = 0 (the result is then a lower bound).
    """
    step = positive(dt_ns, "dt_ns")
    if not 0.0 < low < high < 1.0:
        raise ValueError(f"reference levels need 0 < low < high < 1, got low={low}, high={high}")
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1])
    base = baseline_means(arr, n)
    top, ipk, _ = peak_values(arr)
    finite_rows(top - base, "rise_time")
    t_low = _last_rise_before(arr, ipk, base + low * (top - base))
    t_high = _last_rise_before(arr, ipk, base + high * (top - base))
    return per_row((t_high - t_low) * step, one)


def peaking_time(traces: ArrayLike, dt_ns: float, t0_ns: ArrayLike) -> float | np.ndarray:
    """Time (ns) from the pulse start ``t0_ns`` to the pulse maximum.

    The maximum is the largest sample (the first, positive peak of a unipolar or bipolar shaped
    pulse; the first of equal samples) refined by the vertex of the parabola through it and its
    neighbours.  ``t0_ns`` is a scalar or one value per row, on the axis where sample i is at
    ``i * dt_ns``.
    """
    step = positive(dt_ns, "dt_ns")
    arr, one = as_traces(traces)
    start = _per_row_times(t0_ns, arr.shape[0])
    top, ipk, frac = peak_values(arr)
    finite_rows(top, "peaking_time")
    return per_row((ipk + frac) * step - start, one)


def zero_crossing_time(
    traces: ArrayLike,
    dt_ns: float,
    t0_ns: ArrayLike,
    *,
    n_baseline: int | None = None,
) -> float | np.ndarray:
    """Time (ns) from ``t0_ns`` to the zero crossing that ends the positive lobe of a bipolar pulse.

    The crossing is the first downward crossing of the baseline after the pulse maximum, linearly
    interpolated between samples.  The baseline is 0 mV (traces already baseline-subtracted) unless
    ``n_baseline`` is given, then the mean of the first ``n_baseline`` samples.  Raises ValueError
    when a trace does not cross after its maximum (a unipolar pulse, or a record cut too short).
    """
    step = positive(dt_ns, "dt_ns")
    arr, one = as_traces(traces)
    start = _per_row_times(t0_ns, arr.shape[0])
    if n_baseline is None:
        level = np.zeros(arr.shape[0])
    else:
        level = baseline_means(arr, n_baseline_for(n_baseline, arr.shape[1]))
    top, ipk, _ = peak_values(arr)
    finite_rows(top - level, "zero_crossing_time")
    cols = np.arange(arr.shape[1] - 1)
    falls = (arr[:, 1:] <= level[:, None]) & (arr[:, :-1] > level[:, None])
    falls &= cols >= ipk[:, None]
    j = np.argmax(falls, axis=1)
    missing = np.flatnonzero(~falls[np.arange(arr.shape[0]), j])
    if missing.size:
        raise ValueError(
            f"no zero crossing after the positive lobe in trace rows {missing[:8].tolist()} "
            "(is the pulse bipolar, its baseline subtracted, the record long enough?)"
        )
    y0 = sample_at(arr, j) - level
    y1 = sample_at(arr, j + 1) - level
    return per_row((j + y0 / (y0 - y1)) * step - start, one)


def _last_rise_before(arr: np.ndarray, ipk: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Fractional index of the last upward crossing of ``level`` at or before ``ipk``, per row."""
    width = int(ipk.max()) + 1
    head = arr[:, :width]
    below = (head < level[:, None]) & (np.arange(width) < ipk[:, None])
    any_below = below.any(axis=1)
    j = width - 1 - np.argmax(below[:, ::-1], axis=1)
    y0 = sample_at(arr, j)
    y1 = sample_at(arr, j + 1)
    frac = np.where(y1 > y0, (level - y0) / np.where(y1 > y0, y1 - y0, 1.0), 0.0)
    return np.where(any_below, j + np.clip(frac, 0.0, 1.0), 0.0)


def _per_row_times(t0_ns: ArrayLike, rows: int) -> np.ndarray:
    t0 = np.asarray(t0_ns, dtype=np.float64)
    if t0.ndim == 0:
        t0 = np.full(rows, float(t0))
    if t0.shape != (rows,):
        raise ValueError(f"t0_ns must be a scalar or one value per trace ({rows}), got {t0.shape}")
    if not np.all(np.isfinite(t0)):
        raise ValueError("t0_ns must be finite")
    return t0
