"""Discriminator timing from captured fast pulses: leading-edge and constant-fraction times, time
walk against amplitude and jitter at a fixed amplitude.

* **leading edge** (LE): the first instant the pulse, baseline removed, rises through a fixed
  threshold, linearly interpolated between the straddling samples;
* **constant fraction** (CF): the zero crossing of f·v(t) − v(t − d) (a digital constant-fraction
  discriminator: attenuated pulse minus delayed pulse), interpolated; for pulses of one shape it
  does not move with amplitude, the reason the technique exists (Knoll ch. 17, from memory);
* **walk**: the spread (max − min) of the mean time over the amplitudes scanned;
* **jitter**: the RMS of the times at one amplitude, with its uncertainty σ/√(2(N − 1)); the
  standard estimate σ_t ≈ σ_noise / (dV/dt) at the crossing (REFERENCES.md "timing jitter").

Times in ns on the traces' own axis (``t0_ns`` is the first sample's time), voltages in mV, pulses
positive-going (invert a negative output first).  A trace that never crosses gives NaN for that
trace and is counted in ``refused``; a statistic over no times raises ``ValueError``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_points, as_traces, positive


def _first_rising(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row: index of the first sample >= 0 after one < 0, and whether there is one."""
    up = (x[:, :-1] < 0) & (x[:, 1:] >= 0)
    found = up.any(axis=1)
    return np.argmax(up, axis=1), found


def _interpolate(x: np.ndarray, idx: np.ndarray, found: np.ndarray) -> np.ndarray:
    rows = np.arange(x.shape[0])
    a, b = x[rows, idx], x[rows, idx + 1]
    frac = np.where(b != a, -a / np.where(b != a, b - a, 1.0), 0.0)
    return np.where(found, idx + frac, np.nan)


def leading_edge_times(
    traces: ArrayLike, dt_ns: float, threshold_mV: float, *, t0_ns: float = 0.0, n_baseline: int = 0
) -> np.ndarray:
    """Leading-edge crossing time (ns) of each trace at ``threshold_mV`` above its baseline (the mean
    of the first ``n_baseline`` samples; 0 = no baseline subtraction).  NaN: never crosses."""
    arr, _ = as_traces(traces)
    dt = positive(dt_ns, "dt_ns")
    thr = positive(threshold_mV, "threshold_mV")
    base = arr[:, :n_baseline].mean(axis=1, keepdims=True) if n_baseline > 0 else 0.0
    x = arr - base - thr
    idx, found = _first_rising(x)
    return t0_ns + dt * _interpolate(x, idx, found)


def constant_fraction_times(
    traces: ArrayLike,
    dt_ns: float,
    *,
    fraction: float = 0.3,
    delay_ns: float,
    arming_mV: float,
    t0_ns: float = 0.0,
    n_baseline: int = 0,
) -> np.ndarray:
    """Constant-fraction time (ns): zero crossing of ``fraction``·v(t) − v(t − ``delay_ns``), taken
    after the pulse first exceeds ``arming_mV`` (the arming threshold keeps noise from firing it).
    The delay is rounded to whole samples."""
    arr, _ = as_traces(traces)
    dt = positive(dt_ns, "dt_ns")
    f = positive(fraction, "fraction")
    if f >= 1:
        raise ValueError(f"fraction must be below 1, got {fraction!r}")
    k = max(1, round(positive(delay_ns, "delay_ns") / dt))
    base = arr[:, :n_baseline].mean(axis=1, keepdims=True) if n_baseline > 0 else 0.0
    v = arr - base
    delayed = np.concatenate([np.zeros((v.shape[0], k)), v[:, :-k]], axis=1)
    s = delayed - f * v  # rises through zero when the delayed pulse overtakes the attenuated one
    armed = np.maximum.accumulate(v >= positive(arming_mV, "arming_mV"), axis=1)
    s = np.where(armed, s, -1.0)  # no crossing counts before the pulse arms the discriminator
    idx, found = _first_rising(s)
    return t0_ns + dt * _interpolate(s, idx, found)


@dataclass(frozen=True, kw_only=True)
class Jitter:
    """RMS spread of crossing times (ns) with its uncertainty, from ``n`` times (``refused`` NaN)."""

    rms_ns: float
    uncertainty_ns: float
    mean_ns: float
    n: int
    refused: int


def timing_jitter(times_ns: ArrayLike) -> Jitter:
    """RMS (ddof 1) of the finite crossing times; σ/√(2(N − 1)) its standard uncertainty."""
    t = np.asarray(times_ns, dtype=float).ravel()
    good = t[np.isfinite(t)]
    if good.size < 2:
        raise ValueError(f"jitter needs at least 2 crossing times, got {good.size} of {t.size}")
    rms = float(good.std(ddof=1))
    return Jitter(
        rms_ns=rms,
        uncertainty_ns=rms / math.sqrt(2 * (good.size - 1)),
        mean_ns=float(good.mean()),
        n=int(good.size),
        refused=int(t.size - good.size),
    )


def expected_jitter_ns(noise_mV: float, slope_mV_per_ns: float) -> float:
    """σ_t ≈ σ_noise / (dV/dt) at the threshold crossing (REFERENCES.md, standard)."""
    return positive(noise_mV, "noise_mV") / positive(slope_mV_per_ns, "slope_mV_per_ns")


@dataclass(frozen=True, kw_only=True)
class Walk:
    """Mean crossing time per amplitude and the walk (max − min, ns) over the scan."""

    amplitudes_mV: np.ndarray
    mean_ns: np.ndarray
    walk_ns: float


def time_walk(amplitudes_mV: ArrayLike, times_ns: ArrayLike) -> Walk:
    """Group crossing times by amplitude (equal amplitudes pooled); walk = max − min of the means."""
    a = as_points(amplitudes_mV, "amplitudes_mV", min_len=2)
    t = np.asarray(times_ns, dtype=float).ravel()
    if t.shape != a.shape:
        raise ValueError(f"amplitudes_mV and times_ns differ in length: {a.size} vs {t.size}")
    levels = np.unique(a)
    if levels.size < 2:
        raise ValueError("time walk needs at least two different amplitudes")
    means = np.array(
        [np.nanmean(t[a == v]) if np.isfinite(t[a == v]).any() else np.nan for v in levels]
    )
    if not np.isfinite(means).all():
        bad = levels[~np.isfinite(means)]
        raise ValueError(f"no crossing at amplitude(s) {bad.tolist()} mV: below the threshold?")
    return Walk(amplitudes_mV=levels, mean_ns=means, walk_ns=float(means.max() - means.min()))
