"""State levels of a pulse or step (IEEE Std 181-2011, clauses 5.2-5.3 from memory).

The low state is the mean of the pre-pulse baseline (the first ``n_baseline`` samples: where the
histogram of a two-state waveform has its low mode).  The high state is the mode of the histogram
of the samples beyond half the excursion (the "histogram mode" method), refined by the mean of the
samples in the modal bin and its two neighbours — when that mode is a plateau.  A pulse without a
plateau (a fast preamp pulse that decays at once) has no high mode of its own once noise blurs its
top: its high state is the top of the pulse, the vertex of a least-squares parabola through it
(IEEE 181 allows the peak for waveforms without a flat top; the parabola keeps the noise out).  The bin width is the baseline noise RMS, but not
below ``MIN_BIN_FRACTION`` of the excursion: on a plateau the mode sits on the plateau whatever the
noise does to the largest sample; on a rounded peak (no plateau) the samples crowd near the top,
where the waveform turns, and the mode lies within a bin of the true peak rather than at the
noise-inflated maximum.

Everything is signed by ``polarity`` (+1 positive-going, -1 negative-going): levels are returned in
the trace's own units and sign.
"""

from __future__ import annotations

import numpy as np

MIN_BIN_FRACTION = 1e-5
"""Smallest histogram bin, as a fraction of the excursion (noise-free records)."""
MAX_BINS = 50_000
"""Largest number of bins over the upper half of the excursion."""


def state_levels(
    arr: np.ndarray, n_baseline: int, polarity: int = 1
) -> tuple[np.ndarray, np.ndarray]:
    """Per row of ``arr`` (2-D): (low state, high state), in the trace's units and sign."""
    base = arr[:, :n_baseline].mean(axis=1, dtype=np.float64)
    sigma = arr[:, :n_baseline].std(axis=1, dtype=np.float64)
    signed = polarity * (arr - base[:, None])
    high = np.array([_high_state(row, s) for row, s in zip(signed, sigma, strict=True)])
    return base, base + polarity * high


PLATEAU_SIGMAS = 3.0
"""A histogram mode within this many noise RMS of the smoothed top is a plateau (the high state);
further below it, the mode sits on the pulse's decay and the top itself is the high state."""
SMOOTH_SAMPLES = 9
TOP_BAND = 0.02


def _high_state(signed: np.ndarray, sigma: float) -> float:
    """High state of one baseline-subtracted, positive-going row: the histogram mode on a
    plateau; on a pulse without one (noise spreads its rounded top over the decay's levels, where
    the mode then sits) the vertex of a least-squares parabola through its top."""
    mode = _histogram_mode(signed, sigma)
    if not sigma > 0.0 or signed.size < 3 * SMOOTH_SAMPLES:
        return mode
    peak = _top_vertex(signed, sigma)
    return mode if peak - mode <= PLATEAU_SIGMAS * sigma else peak


def _top_vertex(signed: np.ndarray, sigma: float) -> float:
    """Vertex value of the least-squares parabola through the samples of the top: the contiguous
    run around the maximum of a moving average where it stays within max(4σ, 2 %) of that
    maximum.  Falls back to the moving average's maximum when the run is not concave."""
    smooth = np.convolve(signed, np.ones(SMOOTH_SAMPLES) / SMOOTH_SAMPLES, mode="same")
    edge = SMOOTH_SAMPLES // 2
    smooth[:edge] = smooth[edge]
    smooth[-edge:] = smooth[-edge - 1]
    i = int(np.argmax(smooth))
    floor = smooth[i] - max(4.0 * sigma, TOP_BAND * smooth[i])
    lo, hi = i, i
    while lo > 0 and smooth[lo - 1] >= floor:
        lo -= 1
    while hi < signed.size - 1 and smooth[hi + 1] >= floor:
        hi += 1
    if hi - lo < 4:
        return float(smooth[i])
    x = np.arange(lo, hi + 1) - i
    c2, c1, c0 = np.polyfit(x, signed[lo : hi + 1], 2)
    vertex = -c1 / (2.0 * c2) if c2 < 0 else np.inf
    if not x[0] <= vertex <= x[-1]:
        return float(smooth[i])
    return float(c0 - c1 * c1 / (4.0 * c2))


def _histogram_mode(signed: np.ndarray, sigma: float) -> float:
    """Histogram-mode level of the samples beyond half the row's maximum (see module doc)."""
    top = float(np.max(signed))
    if not top > 0.0:
        return float("nan")
    upper = signed[signed >= 0.5 * top]
    width = max(float(sigma), MIN_BIN_FRACTION * top, 0.5 * top / MAX_BINS)
    bins = max(1, int(np.ceil((top - 0.5 * top) / width)))
    counts, edges = np.histogram(upper, bins=bins, range=(0.5 * top, top))
    mode = len(counts) - 1 - int(np.argmax(counts[::-1]))  # ties: the upper bin
    lo = edges[max(mode - 1, 0)]
    hi = edges[min(mode + 2, len(edges) - 1)]
    near = upper[(upper >= lo) & (upper <= hi)]
    return float(near.mean())
