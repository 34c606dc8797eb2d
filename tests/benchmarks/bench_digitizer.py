"""The fast digitizer's IEEE 1241 analyses against their numpy floors (issue 18, goal <= 3x each):

* ``sine_fit_3``: three-parameter fit of a 10⁶-sample 12-bit record vs ``numpy.linalg.lstsq`` on the
  same 3-column design matrix (the matrix built beforehand: the floor is the solve alone);
* ``sine_fit_4``: four-parameter fit (frequency iterated from a guess 10 ppm off) vs one
  ``numpy.linalg.lstsq`` on its 4-column design matrix;
* ``code_density``: histogram test of 10⁷ codes (int16) vs ``numpy.bincount`` on the same codes.

Each figure is the best of several interleaved repeats, ours and the floor in the same run.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np

from sequencer.analysis import code_density, fit_sine_3, fit_sine_4

FIT_SAMPLES, HIST_SAMPLES = 1_000_000, 10_000_000
FS, F = 500e6, 23.456789e6
REPEATS = 5
GOAL = 3.0


def _record(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    x = 2047.0 * np.sin(2 * np.pi * F * t + 0.3) + 2048.0 + rng.normal(0, 0.7, n)
    return np.clip(np.floor(x), 0, 4095)


def _best(fn: Callable[[], object], best: float) -> float:
    start = time.perf_counter()
    fn()
    return min(best, time.perf_counter() - start)


def _row(name: str, ours: float, base: float, unit: str, floor: str) -> dict:
    ratio = ours / base
    return {
        "name": name,
        "ours": ours,
        "baseline": base,
        "unit": unit,
        "ratio": ratio,
        "goal": f"<= {GOAL:g}x {floor}",
        "verdict": "met" if ratio <= GOAL else "short",
    }


def run() -> list[dict]:
    y = _record(FIT_SAMPLES, 1)
    t = np.arange(FIT_SAMPLES) / FS
    w = 2 * np.pi * F
    d3 = np.column_stack([np.cos(w * t), np.sin(w * t), np.ones_like(t)])
    d4 = np.column_stack([d3, t * np.cos(w * t)])
    codes = _record(HIST_SAMPLES, 2).astype(np.int16)
    best = {k: math.inf for k in ("fit3", "lstsq3", "fit4", "lstsq4", "hist", "bincount")}
    for _ in range(REPEATS):
        best["lstsq3"] = _best(lambda: np.linalg.lstsq(d3, y, rcond=None), best["lstsq3"])
        best["fit3"] = _best(lambda: fit_sine_3(y, F, FS), best["fit3"])
        best["lstsq4"] = _best(lambda: np.linalg.lstsq(d4, y, rcond=None), best["lstsq4"])
        best["fit4"] = _best(lambda: fit_sine_4(y, FS, F * (1 + 1e-5)), best["fit4"])
        best["bincount"] = _best(lambda: np.bincount(codes, minlength=4096), best["bincount"])
        best["hist"] = _best(lambda: code_density(codes, 12), best["hist"])
    unit = f"s ({FIT_SAMPLES:,} samples)"
    return [
        _row("sine_fit_3", best["fit3"], best["lstsq3"], unit, "numpy.linalg.lstsq (3 columns)"),
        _row("sine_fit_4", best["fit4"], best["lstsq4"], unit, "numpy.linalg.lstsq (4 columns)"),
        _row(
            "code_density",
            best["hist"],
            best["bincount"],
            f"s ({HIST_SAMPLES:,} int16 codes)",
            "numpy.bincount",
        ),
    ]
