"""pulse_height over 10,000 traces × 2,500 samples (float64), against numpy.max(axis=1).

Both are timed on the same array in the same run; each figure is the best of several interleaved
repeats (least disturbed by the rest of the machine).  Goals: within 3× of numpy.max(axis=1) for
``method="peak"`` and within 10× for ``method="template"`` (default template: the mean trace, so
that row includes computing it).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np

from sequencer.analysis import pulse_height

ROWS, SAMPLES = 10_000, 2_500
DT_NS, N_BASELINE = 1.0, 200
REPEATS = 7
GOALS = {"peak": 3.0, "template": 10.0}
ROW_NAMES = {"peak": "pulse_height", "template": "pulse_height_template"}


def _traces() -> np.ndarray:
    """CR-RC⁴ pulses (τ = 50 ns, 10-1000 mV) at sample 300 on 0.3 mV RMS white noise, float64."""
    rng = np.random.default_rng(2024)
    x = np.clip((np.arange(SAMPLES) * DT_NS - 300.0) / 50.0, 0.0, None)
    shape = x**4 * np.exp(-x) / math.factorial(4)
    amps = rng.uniform(10.0, 1000.0, ROWS)
    traces = rng.standard_normal((ROWS, SAMPLES))
    for lo in range(0, ROWS, 1000):
        block = traces[lo : lo + 1000]
        block *= 0.3
        block += amps[lo : lo + 1000, None] * shape
    return traces


def _best(fn: Callable[[], object], best: float) -> float:
    start = time.perf_counter()
    fn()
    return min(best, time.perf_counter() - start)


def run() -> list[dict]:
    traces = _traces()
    rows = []
    for method, goal in GOALS.items():
        ours = base = math.inf
        for _ in range(REPEATS):
            base = _best(lambda: np.max(traces, axis=1), base)
            ours = _best(lambda m=method: pulse_height(traces, DT_NS, N_BASELINE, method=m), ours)
        ratio = ours / base
        rows.append(
            {
                "name": ROW_NAMES[method],
                "ours": ours,
                "baseline": base,
                "unit": f"s (float64 {ROWS}x{SAMPLES})",
                "ratio": ratio,
                "goal": f"<= {goal:g}x numpy.max(axis=1)",
                "verdict": "met" if ratio <= goal else "short",
            }
        )
    return rows
