"""The series an analysis step computed, kept with its results (``StepResult.results["series"]``).

Reports draw these; they never re-run an analysis or parse a step path (STYLE.md rule 17).  Each
series is a JSON mapping with ``kind`` and ``channel``:

* ``transfer``: ``output``, per injected amplitude ``x_mV``, the mean output height ``y_mV`` and the
  mean residual from the fitted line ``residual_mV``; the fit ``gain``, ``offset_mV``, ``inl_pct``;
* ``s_curve``: ``label``, thresholds ``x_mV``, ``counts`` of ``trials``, the fit ``mu_mV``,
  ``sigma_mV`` (one per injected amplitude for a discriminator scan);
* ``pulse``: ``output``, ``quantity``, its ``value``, the mean captured pulse ``mean_mV`` with
  ``dt_ns``, ``t0_ns`` and ``n_traces``, and landmarks of the mean pulse (``peak_ns``, ``peak_mV``,
  ``baseline_mV``; extremes by sign, so a negative-going pulse's peak is its minimum).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np


def _floats(values: Any) -> list[float]:
    return [float(v) for v in np.atleast_1d(np.asarray(values, dtype=float))]


def transfer_series(
    channel: int | None, output: str | None, x: np.ndarray, heights: np.ndarray, fit: Any
) -> dict[str, Any]:
    """Mean height and residual per amplitude of a fitted transfer curve."""
    x = np.asarray(x, dtype=float)
    heights = np.asarray(heights, dtype=float)
    residuals = np.asarray(fit.fit.residuals, dtype=float)
    amps = sorted(set(x.tolist()))
    return {
        "kind": "transfer",
        "channel": channel,
        "output": output or "",
        "x_mV": amps,
        "y_mV": [float(heights[x == a].mean()) for a in amps],
        "residual_mV": [float(residuals[x == a].mean()) for a in amps],
        "gain": float(fit.gain),
        "offset_mV": float(fit.offset_mV),
        "inl_pct": float(fit.inl_pct),
    }


def s_curve_series(
    channel: int | None, label: str, x: Sequence[float], counts: Sequence[float], trials: int, fit: Any
) -> dict[str, Any]:
    """An S-curve's points and its fitted μ and σ (mV)."""
    order = np.argsort(np.asarray(x, dtype=float), kind="stable")
    return {
        "kind": "s_curve",
        "channel": channel,
        "label": label,
        "x_mV": [float(np.asarray(x, dtype=float)[i]) for i in order],
        "counts": [int(np.asarray(counts)[i]) for i in order],
        "trials": int(trials),
        "mu_mV": float(fit.mu),
        "sigma_mV": float(fit.sigma),
    }


def pulse_series(
    channel: int | None,
    output: str | None,
    quantity: str,
    value: float,
    rows: np.ndarray,
    dt_ns: float,
    t0_ns: float,
    n_baseline: int,
) -> dict[str, Any]:
    """The mean of the captured pulses a timing was taken from, with its landmarks."""
    mean = np.asarray(rows, dtype=float).mean(axis=0)
    baseline = float(mean[: max(1, n_baseline)].mean())
    up = float(mean.max() - baseline) >= float(baseline - mean.min())
    peak = int(np.argmax(mean) if up else np.argmin(mean))
    return {
        "kind": "pulse",
        "channel": channel,
        "output": output or "",
        "quantity": quantity,
        "value": float(value),
        "dt_ns": float(dt_ns),
        "t0_ns": float(t0_ns),
        "n_traces": int(np.asarray(rows).shape[0]),
        "mean_mV": _floats(mean),
        "peak_ns": float(t0_ns + peak * dt_ns),
        "peak_mV": float(mean[peak]),
        "baseline_mV": baseline,
    }
