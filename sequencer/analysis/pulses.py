"""Pulse amplitude and baseline noise of captured traces.

Conventions for every function here: ``traces`` is 1-D (one trace) or 2-D (one trace a row) in mV;
sample ``i`` of a trace sits at ``t = i * dt_ns``; the first ``n_baseline`` samples are pre-pulse
baseline.  ``polarity`` is +1 for a positive-going output, -1 for a negative-going one: heights carry
the output's sign.  A single trace gives a float, a 2-D input one value per row.  Floating inputs are
used in their own dtype (no copy of float32 captures).  Rows that cannot be measured give NaN; the
reason is :func:`~sequencer.analysis.refusals.pulse_reasons` of the same rows.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces, finite_rows, n_baseline_for, per_row, positive
from .refusals import (
    DEFAULT_MIN_SNR,
    FLAT_TOP,
    WRONG_POLARITY,
    check_polarity,
    check_rails,
    clipping_reasons,
    no_pulse,
    pulse_reasons,
    refuse_rows,
)

HEIGHT_METHODS = ("peak", "template")


def baseline_rms(
    traces: ArrayLike, n_baseline: int, *, rails_mV: ArrayLike | None = None
) -> float | np.ndarray:
    """RMS (mV) about the mean of the first ``n_baseline`` samples of each trace (ddof = 0).

    With ``rails_mV`` (the digitizer's range limits) a trace with samples at a rail gives NaN: the
    RMS of a clipped baseline reads low (reason: ``refusals.clipping_reasons``).
    """
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1], minimum=2, whole_trace=True)
    rms = np.std(arr[:, :n], axis=1, dtype=np.float64)
    finite_rows(rms, "baseline_rms")
    rms = refuse_rows(rms, clipping_reasons(arr[:, :n], check_rails(rails_mV)))
    return per_row(rms, one)


def baseline_level(
    traces: ArrayLike, n_baseline: int, *, rails_mV: ArrayLike | None = None
) -> float | np.ndarray:
    """Mean (mV) of the first ``n_baseline`` samples of each trace: the output's DC level.

    NaN for a trace with samples at a rail of ``rails_mV`` (its mean is the rail's, not the
    output's).
    """
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1], minimum=1, whole_trace=True)
    level = baseline_means(arr, n)
    finite_rows(level, "baseline_level")
    level = refuse_rows(level, clipping_reasons(arr[:, :n], check_rails(rails_mV)))
    return per_row(level, one)


def pulse_height(
    traces: ArrayLike,
    dt_ns: float,
    n_baseline: int,
    method: str = "peak",
    template: ArrayLike | None = None,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: ArrayLike | None = None,
) -> float | np.ndarray:
    """Pulse height (mV) from the mean of the first ``n_baseline`` samples, with the output's sign.

    ``method="peak"``: the extreme sample in the direction of ``polarity`` (+1: the largest, -1:
    the smallest), refined by the vertex of the parabola through it and its two neighbours (plain
    sample value at the record's ends).

    ``method="template"``: least-squares amplitude of a reference shape (the matched filter, the
    minimum-variance estimate for a known shape in white noise, better than the peak for small
    pulses): with y the baseline-subtracted trace and s the template scaled to unit peak,
    height = Σ y·s / Σ s².  ``template`` is a 1-D baseline-free shape as long as the traces; by
    default the baseline-subtracted mean of the traces.  The pulse must sit where it sits in the
    template (no time shift is fitted).

    ``dt_ns`` (> 0) is the sample interval; heights do not depend on it.

    Refusals (NaN, reason from :func:`~sequencer.analysis.refusals.pulse_reasons`): no excursion
    above ``min_snr`` baseline RMS, a larger excursion against ``polarity`` (wrong polarity), a
    flat top, samples at a rail of ``rails_mV``.  With the template method the template itself must
    show a pulse of that polarity, and each row's height is judged against the matched filter's
    own noise (see ``_template_reasons``).
    """
    positive(dt_ns, "dt_ns")
    sign = check_polarity(polarity)
    rails = check_rails(rails_mV)
    if method not in HEIGHT_METHODS:
        raise ValueError(f"method must be one of {HEIGHT_METHODS}, got {method!r}")
    if method == "peak" and template is not None:
        raise ValueError('template is used only with method="template"')
    arr, one = as_traces(traces)
    n = n_baseline_for(n_baseline, arr.shape[1])
    base = baseline_means(arr, n)
    if method == "peak":
        top, ipk, _ = peak_values(arr if sign > 0 else -arr)
        heights = top - base if sign > 0 else -(top + base)
        finite_rows(heights, "pulse_height")
        extreme = sample_at(arr, ipk)
        why = pulse_reasons(
            arr,
            n,
            polarity=sign,
            min_snr=min_snr,
            rails_mV=rails,
            peaks=(ipk, extreme),
            baseline=base,
        )
    else:
        shape = _template_for(arr, n, template)
        shape_why = pulse_reasons(shape[None, :], n, polarity=sign, min_snr=min_snr)[0]
        unit = sign * shape / float(np.max(sign * shape)) if not shape_why else shape
        heights = (arr @ unit.astype(arr.dtype) - base * unit.sum()) / float(unit @ unit)
        finite_rows(heights, "pulse_height")
        why = _template_reasons(arr, n, heights, unit, sign, min_snr, rails, shape_why)
    return per_row(refuse_rows(heights, why), one)


def _template_reasons(
    arr: np.ndarray,
    n: int,
    heights: np.ndarray,
    unit: np.ndarray,
    sign: int,
    min_snr: float,
    rails: tuple[float, float] | None,
    shape_why: str,
) -> list[str]:
    """Per row: why a matched-filter height is refused.  Its noise is σ/√Σs² for white baseline
    noise σ and the unit template s (Spieler 2005 ch. 4 on optimum filtering, from memory): a
    height within ``min_snr`` of that noise is no pulse, one beyond it against ``polarity`` the
    wrong polarity."""
    sigma_h = arr[:, :n].std(axis=1, dtype=np.float64) / float(np.sqrt(unit @ unit))
    floor = np.maximum(min_snr * sigma_h, 1e-9 * np.abs(heights))
    clip = clipping_reasons(arr, rails)
    peak = pulse_reasons(arr, n, polarity=sign, min_snr=0.0)
    out = []
    for i, c in enumerate(clip):
        signed = sign * heights[i]
        if c or shape_why:
            out.append(c or shape_why)
        elif signed < 0.0 and -signed > floor[i]:
            out.append(WRONG_POLARITY)
        elif not signed > floor[i]:
            out.append(no_pulse(min_snr))
        else:
            out.append(FLAT_TOP if peak[i] == FLAT_TOP else "")
    return out


def baseline_means(arr: np.ndarray, n_baseline: int) -> np.ndarray:
    """Mean of the first ``n_baseline`` samples of each row (float64)."""
    return arr[:, :n_baseline].mean(axis=1, dtype=np.float64)


def peak_values(arr: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Parabola-refined maximum of each row, the index of its largest sample and the vertex offset.

    The parabola through (i-1, i, i+1) around the largest sample i has its vertex at
    i + p, p = (y₋ - y₊) / (2 (y₋ - 2y₀ + y₊)), value y₀ - (y₋ - y₊) p / 4.  At the record's ends
    or where the three samples are not concave p = 0 and the sample itself is kept.  NaN anywhere
    in a row makes its value NaN (argmax stops at the first NaN).
    """
    last = arr.shape[1] - 1
    idx = np.argmax(arr, axis=1)
    y0 = sample_at(arr, idx)
    ym = sample_at(arr, idx - 1)
    yp = sample_at(arr, idx + 1)
    curv = ym - 2.0 * y0 + yp
    ok = (curv < 0.0) & (idx > 0) & (idx < last)
    p = np.zeros_like(y0)
    np.divide(0.5 * (ym - yp), curv, out=p, where=ok)
    return y0 - 0.25 * (ym - yp) * p, idx, p


def sample_at(arr: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """``arr[row, idx[row]]`` for every row as float64, indices clipped to the record."""
    col = np.clip(idx, 0, arr.shape[1] - 1)[:, None]
    return np.take_along_axis(arr, col, axis=1)[:, 0].astype(np.float64)


def _template_for(arr: np.ndarray, n_baseline: int, template: ArrayLike | None) -> np.ndarray:
    """The reference shape, baseline-free (float64, one value per sample)."""
    if template is None:
        mean = np.full(arr.shape[0], 1.0 / arr.shape[0], dtype=arr.dtype) @ arr
        shape = mean.astype(np.float64) - mean[:n_baseline].mean(dtype=np.float64)
    else:
        shape = np.asarray(template, dtype=np.float64)
        if shape.shape != (arr.shape[1],):
            raise ValueError(
                f"template must be 1-D with one value per sample ({arr.shape[1]}), "
                f"got shape {shape.shape}"
            )
    if not np.all(np.isfinite(shape)):
        raise ValueError("template (or the mean trace it defaults to) has NaN or inf samples")
    if not np.any(shape):
        raise ValueError("template is flat (all zero): there is no pulse shape to fit")
    return shape


def pretrigger_baseline(n_baseline: int, t0_ns: float, dt_ns: float, *, margin: int = 2) -> int:
    """The baseline window in samples: ``n_baseline`` when positive, else (0) every sample recorded
    before the trigger instant t = 0, where the test pulse starts, less ``margin`` samples.

    ``t0_ns`` is the time of the first sample relative to the trigger (negative = pre-trigger).
    Raises ``ValueError`` when fewer than 4 pre-trigger samples remain.
    """
    if n_baseline > 0:
        return int(n_baseline)
    if not dt_ns > 0:
        raise ValueError(f"sample interval must be positive, got {dt_ns} ns")
    pre = int(np.floor(-t0_ns / dt_ns)) - margin
    if pre < 4:
        raise ValueError(
            f"only {max(pre + margin, 0)} pre-trigger samples: set the scope's pretrigger or give n_baseline"
        )
    return pre
