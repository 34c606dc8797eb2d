"""Simulated counter on the light sensors' discriminators: dark counts above a threshold.

Per gate of G simulated seconds on channel c (``ROUTe:TERMinals:CHANnel``) with the threshold DAC's
level of c: the count is Poisson with mean G·rate, rate from :func:`drivers.sim.sipm.rate_above_hz`
(dark pulses with branching crosstalk whose height with noise crosses the threshold, plus Rice noise
firings).  Commands as :mod:`drivers.sim.counter`: ``[SENSe:]GATE:TIME``, ``ROUTe:TERMinals:CHANnel``,
``INITiate``, ``FETCh[:TOTalize]?`` (waits for the gate: G·time_scale real seconds).
"""

from __future__ import annotations

from drivers.sim.counter import GatedCounter
from drivers.sim.sensor_rig import SensorRig
from drivers.sim.sipm import rate_above_hz
from drivers.sim.threshold import ThresholdDac


class DarkCounter(GatedCounter):
    """The counter role of a sensor bench."""

    def __init__(self, *, rig: SensorRig, threshold: ThresholdDac, **kwargs: object) -> None:
        self.rig = rig
        self.threshold = threshold
        super().__init__(**kwargs)

    def channel_count(self) -> int:
        return len(self.rig.spec.sensors)

    def expected_rate_hz(self) -> float:
        c = self.channel
        return rate_above_hz(
            self.threshold.level_mV(c),
            sipm=self.rig.spec.sensors[c - 1],
            readout=self.rig.spec.readout,
            over_V=self.rig.over_V(c),
        )

    def start_gate(self) -> None:
        self.gates += 1
        rate = self.expected_rate_hz()
        self.count = int(self.rig.rng(self.instrument_id, self.gates).poisson(rate * self.gate_s))
        self.gate_end = self.clock() + self.rig.real_seconds(self.gate_s)
