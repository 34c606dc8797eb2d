"""Captures averaged until a pulse height reaches a target standard uncertainty.

The stopping rule is the Type A evaluation of standard uncertainty of the GUM (JCGM 100:2008
§4.2): n independent observations q_k of a quantity (here the pulse height of each capture) give
the mean q̄ (§4.2.1), the experimental standard deviation s(q_k) with n − 1 in the denominator
(§4.2.2) and the experimental standard deviation of the mean s(q̄) = s(q_k)/√n (§4.2.3), which
is the standard uncertainty of q̄.  :class:`MeanToTarget` takes captures until s(q̄) is at or
below the target, never fewer than ``min_count`` (s from two or three observations is itself very
uncertain, GUM §4.3.2 note 1 and Table E.1) and never more than ``max_count``.

The height of one capture is the least-squares amplitude of the mean of the captures so far (the
matched filter of :func:`sequencer.analysis.pulses.pulse_height`'s template method), recomputed
for every capture as the mean sharpens; its sign does not matter to the spread.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from ._checks import positive


def capture_heights(rows: ArrayLike, n_baseline: int) -> np.ndarray:
    """Height of each row (mV in, mV out): Σ y·s / Σ s² with y the row less its baseline (mean of
    its first ``n_baseline`` samples) and s the baseline-free mean of all rows scaled to unit peak.
    NaN for every row when the mean shows no pulse (its shape is flat) or a sample is not finite."""
    arr = np.atleast_2d(np.asarray(rows, dtype=float))
    n = max(1, min(int(n_baseline), arr.shape[1]))
    y = arr - arr[:, :n].mean(axis=1, keepdims=True)
    mean = y.mean(axis=0)
    peak = float(np.max(np.abs(mean))) if mean.size else 0.0
    if not np.all(np.isfinite(arr)) or not peak > 0.0:
        return np.full(arr.shape[0], np.nan)
    unit = mean / peak
    return (y @ unit) / float(unit @ unit)


@dataclass
class MeanToTarget:
    """Observations taken until the standard uncertainty of their mean reaches ``target``.

    ``add`` one observation at a time; :attr:`stopped` says why no more are wanted ("" while
    more are).  A non-finite observation stops at once: no count of captures measures what a
    reading cannot (the analysis downstream refuses it with its reason).
    """

    target: float
    min_count: int = 3
    max_count: int = 16
    values: list[float] = field(default_factory=list)
    stopped: str = ""

    def __post_init__(self) -> None:
        positive(self.target, "target")
        if self.min_count < 2:
            raise ValueError(
                f"min_count must be at least 2 (a spread needs two), got {self.min_count}"
            )
        if self.max_count < self.min_count:
            raise ValueError(f"max_count ({self.max_count}) is below min_count ({self.min_count})")

    @property
    def standard_error(self) -> float:
        """s(q̄) = s(q_k)/√n (GUM §4.2.3); NaN below two observations."""
        n = len(self.values)
        if n < 2:
            return math.nan
        return float(np.std(self.values, ddof=1)) / math.sqrt(n)

    @property
    def reached(self) -> bool:
        """True when the target uncertainty was reached with at least ``min_count`` observations."""
        return len(self.values) >= self.min_count and self.standard_error <= self.target

    def replace_all(self, values: ArrayLike) -> None:
        """Set the observations (the heights are recomputed as the template sharpens) and decide."""
        self.values = [float(v) for v in np.atleast_1d(np.asarray(values, dtype=float))]
        n = len(self.values)
        if not all(math.isfinite(v) for v in self.values):
            self.stopped = "a capture's height could not be measured"
        elif self.reached:
            self.stopped = "target uncertainty reached"
        elif n >= self.max_count:
            self.stopped = "capture budget spent"
        else:
            self.stopped = ""

    def add(self, value: float) -> None:
        """One more observation."""
        self.replace_all([*self.values, value])
