"""Crosstalk: the signal a driven (aggressor) channel induces on a neighbouring (victim) channel.

Both traces are in mV on the same time base, baseline = mean of the first ``n_baseline`` samples.
1-D traces give a float; 2-D victims (one acquisition a row) give one value per row, with a 1-D
aggressor or with a 2-D aggressor of the same shape (row paired with row).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, finite_rows, n_baseline_for, per_row, positive
from .pulses import baseline_means, peak_values


def crosstalk_percent(
    aggressor: ArrayLike, victim: ArrayLike, dt_ns: float, n_baseline: int
) -> float | np.ndarray:
    """100 · k, k the least-squares scale of the aggressor's shape that best matches the victim.

    With a and v the baseline-subtracted traces, k = Σ v·a / Σ a²: the victim's amplitude measured
    with the aggressor's pulse as template, divided by the aggressor's amplitude.  This is the
    figure for resistive or shared-ground coupling, where the victim is a scaled copy (k is exact
    there and immune to the victim's noise).  A purely capacitive victim ∝ da/dt is orthogonal to
    a (Σ a·a' = [a²/2] = 0 for a pulse that starts and ends at baseline), so this gives ≈ 0 for
    it: measure a bipolar victim with :func:`crosstalk_peak_percent`.  ``dt_ns`` (> 0) is the
    common sample interval; the ratio does not depend on it.
    """
    agg, vic, one = _pair(aggressor, victim, dt_ns)
    n = n_baseline_for(n_baseline, vic.shape[1])
    a = agg - baseline_means(agg, n)[:, None]
    v = vic - baseline_means(vic, n)[:, None]
    energy = np.einsum("ij,ij->i", a, a)
    if np.any(energy <= 0.0):
        raise ValueError("aggressor trace is flat after baseline subtraction: no pulse to scale")
    ratio = 100.0 * np.einsum("ij,ij->i", np.broadcast_to(a, v.shape), v) / energy
    finite_rows(ratio, "crosstalk_percent")
    return per_row(ratio, one)


def crosstalk_peak_percent(
    aggressor: ArrayLike, victim: ArrayLike, dt_ns: float, n_baseline: int
) -> float | np.ndarray:
    """100 · max|victim| / aggressor pulse height, both above their baselines.

    The max |V| definition for a victim of either sign or a bipolar one (capacitive coupling:
    victim ≈ R_in C_c da/dt).  Both extrema are parabola-refined like
    :func:`~sequencer.analysis.pulses.pulse_height`.  On a victim without crosstalk it returns the
    largest noise excursion, so compare it with the same figure on an undriven trace.
    """
    agg, vic, one = _pair(aggressor, victim, dt_ns)
    n = n_baseline_for(n_baseline, vic.shape[1])
    height = peak_values(agg)[0] - baseline_means(agg, n)
    if np.any(height <= 0.0):
        raise ValueError("aggressor has no positive pulse above its baseline")
    v = vic - baseline_means(vic, n)[:, None]
    swing = np.maximum(peak_values(v)[0], peak_values(-v)[0])
    ratio = 100.0 * swing / height
    finite_rows(ratio, "crosstalk_peak_percent")
    return per_row(ratio, one)


def crosstalk_db(percent: ArrayLike) -> float | np.ndarray:
    """Crosstalk in dB, 20 · log10(percent / 100): 1 % is -40 dB."""
    pct = np.asarray(percent, dtype=np.float64)
    if not np.all(np.isfinite(pct)) or np.any(pct <= 0.0):
        raise ValueError("crosstalk percent must be finite and > 0 to express in dB")
    db = 20.0 * np.log10(pct / 100.0)
    return float(db) if db.ndim == 0 else db


def _pair(
    aggressor: ArrayLike, victim: ArrayLike, dt_ns: float
) -> tuple[np.ndarray, np.ndarray, bool]:
    positive(dt_ns, "dt_ns")
    agg, agg_one = as_traces(aggressor, "aggressor")
    vic, vic_one = as_traces(victim, "victim")
    if agg.shape[1] != vic.shape[1]:
        raise ValueError(
            f"aggressor and victim differ in samples per trace: {agg.shape[1]} vs {vic.shape[1]}"
        )
    if not agg_one and agg.shape != vic.shape:
        raise ValueError(
            f"a 2-D aggressor must pair row by row with the victim: {agg.shape} vs {vic.shape}"
        )
    return agg, vic, agg_one and vic_one
