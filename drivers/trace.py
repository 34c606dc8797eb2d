"""A captured waveform: calibrated samples with their time base."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Trace:
    """Samples in volts on a uniform time base.

    ``volts`` is 1-D (one acquisition or an average of ``averages`` acquisitions).  The time of sample
    ``i`` is ``t0_s + i * dt_s``; ``t0_s`` is relative to the trigger (negative = pre-trigger).
    ``source`` names the scope input (``"CHAN1"``); ``averages`` how many acquisitions were averaged.
    """

    volts: np.ndarray
    dt_s: float
    t0_s: float = 0.0
    source: str = ""
    averages: int = 1
    meta: dict[str, str] = field(default_factory=dict)

    @property
    def mV(self) -> np.ndarray:
        """Samples in millivolts."""
        return self.volts * 1e3

    @property
    def dt_ns(self) -> float:
        """Sample interval in nanoseconds."""
        return self.dt_s * 1e9

    @property
    def t0_ns(self) -> float:
        """Time of the first sample in nanoseconds."""
        return self.t0_s * 1e9

    @property
    def time_ns(self) -> np.ndarray:
        """Time axis in nanoseconds, one value per sample."""
        return self.t0_ns + self.dt_ns * np.arange(self.volts.shape[-1])

    def __len__(self) -> int:
        return int(self.volts.shape[-1])
