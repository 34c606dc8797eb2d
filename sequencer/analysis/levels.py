"""State levels of a pulse or step (IEEE Std 181-2011, clauses 5.2-5.3 from memory).

The low state is the mean of the pre-pulse baseline (the first ``n_baseline`` samples: where the
histogram of a two-state waveform has its low mode).  The high state is the mode of the histogram
of the samples beyond half the excursion (the "histogram mode" method), refined by the mean of the
samples in the modal bin and its two neighbours.  The bin width is the baseline noise RMS, but not
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


def _high_state(signed: np.ndarray, sigma: float) -> float:
    """Histogram-mode high state of one baseline-subtracted, positive-going row."""
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
