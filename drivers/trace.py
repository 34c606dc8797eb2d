"""A captured waveform: calibrated samples with their time base."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

META_NOT_STORED = "meta_not_stored"
"""Key of ``Trace.meta`` on a trace read back from a store that did not keep its meta (rows written
before schema revision 0008): what the capture knew (its input's rails) is lost, not empty."""


@dataclass(frozen=True)
class Trace:
    """Samples in volts on a uniform time base: the one trace record of benchwright.

    ``volts`` is 1-D (one acquisition or an average of ``averages`` acquisitions).  The time of sample
    ``i`` is ``t0_s + i * dt_s``; ``t0_s`` is relative to the trigger (negative = pre-trigger).
    ``source`` names the scope input (``"CHAN1"``); ``averages`` how many acquisitions were averaged.

    The same record crosses every layer (STYLE.md rule 16): a driver returns it with the capture
    fields; the engine gives it the ``name`` the procedure chose and its step's ``labels`` (channel,
    output, sweep values); the store keeps it with its step ``path`` and hands it back the same way,
    so resume replays exactly what was captured without a converter.  A leaf module (numpy only):
    the store and the reports may import it.
    """

    volts: np.ndarray
    dt_s: float
    t0_s: float = 0.0
    source: str = ""
    averages: int = 1
    meta: dict[str, str] = field(default_factory=dict)
    name: str = ""  # the procedure's name for it (``into: [pulses]``)
    labels: Mapping[str, Any] = field(default_factory=dict)  # channel, output, sweep values
    path: str = ""  # the step that captured it, once recorded

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
