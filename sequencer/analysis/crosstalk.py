"""Crosstalk: the signal a driven (aggressor) channel induces on a neighbouring (victim) channel.

Both traces are in mV on the same time base, baseline = mean of the first ``n_baseline`` samples.
1-D traces give a float; 2-D victims (one acquisition a row) give one value per row, with a 1-D
aggressor or with a 2-D aggressor of the same shape (row paired with row).

Crosstalk is signed: positive when the victim moves the way the aggressor does, negative when it is
an inverted copy.  ``polarity`` is the aggressor output's (+1 positive-going, -1 negative-going); a
row is refused (NaN) when the aggressor shows no pulse above ``min_snr`` baseline RMS, a pulse of
the wrong polarity, a flat top, or samples at its rails, or the victim samples at its rails
(reasons: :func:`crosstalk_reasons`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, finite_rows, n_baseline_for, per_row, positive
from .pulses import baseline_means, peak_values
from .refusals import (
    DEFAULT_MIN_SNR,
    check_polarity,
    check_rails,
    clipping_reasons,
    pulse_reasons,
    refuse_rows,
)


def crosstalk_percent(
    aggressor: ArrayLike,
    victim: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
    victim_rails_mV: ArrayLike | None = None,
) -> float | np.ndarray:
    """100 · k, k the least-squares scale of the aggressor's shape that best matches the victim.

    With a and v the baseline-subtracted traces, k = Σ v·a / Σ a²: the victim's amplitude measured
    with the aggressor's pulse as template, divided by the aggressor's amplitude.  This is the
    figure for resistive or shared-ground coupling, where the victim is a scaled copy (k is exact
    there and immune to the victim's noise).  A purely capacitive victim ∝ da/dt is orthogonal to
    a (Σ a·a' = [a²/2] = 0 for a pulse that starts and ends at baseline), so this gives ≈ 0 for
    it: measure a bipolar victim with :func:`crosstalk_peak_percent`.  ``dt_ns`` (> 0) is the
    common sample interval; the ratio does not depend on it.  k is the same for either polarity
    (both traces flip together).
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
    why = crosstalk_reasons(
        agg,
        vic,
        n,
        polarity=polarity,
        min_snr=min_snr,
        rails_mV=rails_mV,
        victim_rails_mV=victim_rails_mV,
    )
    return per_row(refuse_rows(ratio, why), one)


def crosstalk_reasons(
    aggressor: ArrayLike,
    victim: ArrayLike,
    n_baseline: int,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
    victim_rails_mV: ArrayLike | None = None,
) -> list[str]:
    """Per victim row: why its crosstalk cannot be measured ("" when it can)."""
    agg, _ = as_traces(aggressor, "aggressor")
    vic, _ = as_traces(victim, "victim")
    n = n_baseline_for(n_baseline, vic.shape[1])
    sign = check_polarity(polarity)
    agg_why = pulse_reasons(agg, n, polarity=sign, min_snr=min_snr, rails_mV=check_rails(rails_mV))
    vic_why = clipping_reasons(vic, check_rails(victim_rails_mV))
    if len(agg_why) == 1:
        agg_why = agg_why * vic.shape[0]
    return [
        f"aggressor: {a}" if a else (f"victim: {v}" if v else "")
        for a, v in zip(agg_why, vic_why, strict=True)
    ]


def crosstalk_peak_percent(
    aggressor: ArrayLike, victim: ArrayLike, dt_ns: float, n_baseline: int, *, polarity: int = 1
) -> float | np.ndarray:
    """100 · max|victim| / |aggressor pulse height|, both from their baselines.

    The max |V| definition for a victim of either sign or a bipolar one (capacitive coupling:
    victim ≈ R_in C_c da/dt).  Both extrema are parabola-refined like
    :func:`~sequencer.analysis.pulses.pulse_height`.  On a victim without crosstalk it returns the
    largest noise excursion, so compare it with the same figure on an undriven trace.
    """
    sign = check_polarity(polarity)
    agg, vic, one = _pair(aggressor, victim, dt_ns)
    n = n_baseline_for(n_baseline, vic.shape[1])
    height = peak_values(sign * agg)[0] - sign * baseline_means(agg, n)
    if np.any(height <= 0.0):
        raise ValueError("aggressor has no pulse of its polarity above its baseline")
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
