"""Pulse timing: rise time, peaking time and the zero crossing of bipolar pulses (ns).

Time convention: sample ``i`` of a trace sits at ``t = i * dt_ns`` in the trace's own time axis;
``t0_ns`` (the pulse start) is given on that same axis, or fitted (:func:`pulse_onset`): a trigger
instant is not the pulse's start.  ``polarity`` is +1 for a positive-going output, -1 for a
negative-going one; times are the same for both.  1-D input gives a float, 2-D input one value per
row; rows that cannot be measured give NaN (reason: :func:`~sequencer.analysis.refusals.pulse_reasons`
with the same arguments, or ``onset.ONSET_NOT_FITTED``).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, finite_rows, n_baseline_for, per_row, positive
from .levels import state_levels
from .onset import fit_onset
from .pulses import baseline_means, peak_values, sample_at
from .refusals import (
    DEFAULT_MIN_SNR,
    check_polarity,
    check_rails,
    pulse_reasons,
    refuse_rows,
)


def rise_time(
    traces: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    low: float = 0.1,
    high: float = 0.9,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
) -> float | np.ndarray:
    """Transition duration (ns) of the leading edge between the ``low`` and ``high`` reference levels.

    IEEE Std 181-2011 (clauses 5.2-5.3, from memory): level x = low state + x · (high state - low
    state), the states from :func:`~sequencer.analysis.levels.state_levels` (baseline mean; the
    histogram mode of the upper half, not the noisy largest sample).  Each crossing instant is the
    mean of the first and last crossings inside the noise band about the level (linearly
    interpolated; one crossing without noise).  A step's plateau is its high
    state, so a flat top is not refused here; clipping at ``rails_mV`` is.  Crossings are those of
    the edge towards the pulse's extreme (upward for ``polarity`` +1) before that extreme.
    An edge already beyond a level at the first sample is timed from t = 0 (the result is then a
    lower bound).  Refused rows (no pulse, wrong polarity, clipped) give NaN.
    """
    step = positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    if not 0.0 < low < high < 1.0:
        raise ValueError(f"reference levels need 0 < low < high < 1, got low={low}, high={high}")
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1])
    signed = sign * arr
    top, ipk, _ = peak_values(signed)
    finite_rows(top, "rise_time")
    rails = check_rails(rails_mV)
    why = pulse_reasons(arr, n, polarity=sign, min_snr=min_snr, rails_mV=rails, flat_top=False)
    base, state = state_levels(signed, n)
    sigma = signed[:, :n].std(axis=1, dtype=np.float64)
    t_low = _edge_crossings(signed, ipk, base + low * (state - base), sigma)
    t_high = _edge_crossings(signed, ipk, base + high * (state - base), sigma)
    return per_row(refuse_rows((t_high - t_low) * step, why), one)


def peaking_time(
    traces: ArrayLike,
    dt_ns: float,
    t0_ns: ArrayLike | None = None,
    *,
    n_baseline: int | None = None,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
) -> float | np.ndarray:
    """Time (ns) from the pulse start to its first peak in the output's direction.

    The start is ``t0_ns`` when given (a scalar or one value per row, on the axis where sample i
    is at ``i * dt_ns``), else the fitted onset of :func:`pulse_onset` (needs ``n_baseline``).
    With a given start the peak is the extreme sample in the direction of ``polarity`` (the first,
    positive peak of a unipolar or bipolar shaped pulse for +1; the first of equal samples)
    refined by the vertex of the parabola through it and its neighbours; with a fitted start it
    is the fitted shape's peak (:mod:`~sequencer.analysis.onset`).  With ``n_baseline`` the pulse checks apply
    (no pulse, wrong polarity, flat top, clipped at ``rails_mV`` → NaN).
    """
    step = positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    arr, one = as_traces(traces)
    top, ipk, frac = peak_values(sign * arr)
    finite_rows(top, "peaking_time")
    if n_baseline is None:
        if t0_ns is None:
            raise ValueError("peaking_time needs t0_ns (the pulse start) or n_baseline (to fit it)")
        return per_row((ipk + frac) * step - _per_row_times(t0_ns, arr.shape[0]), one)
    n = n_baseline_for(n_baseline, arr.shape[1])
    why = pulse_reasons(arr, n, polarity=sign, min_snr=min_snr, rails_mV=check_rails(rails_mV))
    if t0_ns is None:
        start, peak = _onsets(arr, step, n, sign, why)
    else:
        start, peak = _per_row_times(t0_ns, arr.shape[0]), (ipk + frac) * step
    return per_row(refuse_rows(peak - start, why), one)


def pulse_onset(
    traces: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
) -> float | np.ndarray:
    """Fitted start (ns, sample i at i·dt) of a shaped pulse (:mod:`~sequencer.analysis.onset`).

    NaN for rows that fail the pulse checks or whose fit does not converge.
    """
    step = positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1])
    why = pulse_reasons(arr, n, polarity=sign, min_snr=min_snr, rails_mV=check_rails(rails_mV))
    return per_row(refuse_rows(_onsets(arr, step, n, sign, why)[0], why), one)


def onset_and_peaking_time(
    traces: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
) -> tuple[float | np.ndarray, float | np.ndarray]:
    """:func:`pulse_onset` and :func:`peaking_time` (with ``n_baseline``, no ``t0_ns``) from one fit
    of each row: the same values as the two calls, for half the fitting (each fit is ~10 ms of
    least squares; the two calls would fit every row twice)."""
    step = positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    arr, one = as_traces(traces)
    top, _, _ = peak_values(sign * arr)
    finite_rows(top, "peaking_time")
    n = n_baseline_for(n_baseline, arr.shape[1])
    why = pulse_reasons(arr, n, polarity=sign, min_snr=min_snr, rails_mV=check_rails(rails_mV))
    start, peak = _onsets(arr, step, n, sign, why)
    return per_row(refuse_rows(start, why), one), per_row(refuse_rows(peak - start, why), one)


def _onsets(
    arr: np.ndarray, dt_ns: float, n_baseline: int, sign: int, why: list[str]
) -> tuple[np.ndarray, np.ndarray]:
    """Fitted onset and peak instant of every row not refused (NaN for the others)."""
    signed = sign * (arr - baseline_means(arr, n_baseline)[:, None])
    out = np.full((2, arr.shape[0]), np.nan)
    for i, row in enumerate(signed):
        if not why[i]:
            out[:, i] = fit_onset(row.astype(np.float64), dt_ns, int(np.argmax(row)))
    return out[0], out[1]


def zero_crossing_time(
    traces: ArrayLike,
    dt_ns: float,
    t0_ns: ArrayLike,
    *,
    n_baseline: int | None = None,
    polarity: int = 1,
) -> float | np.ndarray:
    """Time (ns) from ``t0_ns`` to the zero crossing that ends the first lobe of a bipolar pulse.

    The crossing is the first crossing of the baseline back from the pulse's extreme in the
    direction of ``polarity`` (downward after the maximum for +1), linearly interpolated between
    samples.  The baseline is 0 mV (traces already baseline-subtracted) unless
    ``n_baseline`` is given, then the mean of the first ``n_baseline`` samples.  Raises ValueError
    when a trace does not cross after its maximum (a unipolar pulse, or a record cut too short).
    """
    step = positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    arr, one = as_traces(traces)
    arr = sign * arr
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


EDGE_NOISE_SIGMAS = 3.0
"""Noise band about a reference level, in baseline RMS, inside which a noisy edge may cross it
several times."""


def _edge_crossings(
    arr: np.ndarray, ipk: np.ndarray, level: np.ndarray, sigma: np.ndarray
) -> np.ndarray:
    """Fractional index where each row's rising edge crosses ``level`` before its peak ``ipk``.

    Noise makes an edge cross a level several times inside the band level ± 3σ: the instant is
    the mean of the first and the last upward crossing within the edge's passage through that band
    (from its last sample below the band to its first sample above it), each linearly
    interpolated; without noise that is the single crossing.  An edge already at or above the
    level at the first sample gives 0.
    """
    out = np.zeros(arr.shape[0])
    for i, row in enumerate(arr):
        head = np.asarray(row[: int(ipk[i]) + 1], dtype=np.float64)
        band = EDGE_NOISE_SIGMAS * float(sigma[i])
        low = np.flatnonzero(head[:-1] < level[i] - band) if band > 0 else np.array([], int)
        below = np.flatnonzero(head[:-1] < level[i])
        if below.size == 0:
            continue
        first = int(low[-1]) if low.size else 0
        above = np.flatnonzero(head[first:] >= level[i] + band)
        last = first + int(above[0]) if above.size else head.size - 1
        seg = head[first : last + 1]
        ups = np.flatnonzero((seg[:-1] < level[i]) & (seg[1:] >= level[i]))
        if ups.size == 0:
            continue
        times = first + ups + (level[i] - seg[ups]) / (seg[ups + 1] - seg[ups])
        out[i] = 0.5 * (times[0] + times[-1])
    return out


def _per_row_times(t0_ns: ArrayLike, rows: int) -> np.ndarray:
    t0 = np.asarray(t0_ns, dtype=np.float64)
    if t0.ndim == 0:
        t0 = np.full(rows, float(t0))
    if t0.shape != (rows,):
        raise ValueError(f"t0_ns must be a scalar or one value per trace ({rows}), got {t0.shape}")
    if not np.all(np.isfinite(t0)):
        raise ValueError("t0_ns must be finite")
    return t0
