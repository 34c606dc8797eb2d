"""Simulated counter on the light sensors' discriminators: dark counts above a threshold.

Per gate of G simulated seconds on channel c (``ROUTe:TERMinals:CHANnel``) with the threshold DAC's
level of c: the count is Poisson with mean G·rate, rate from :func:`drivers.sim.sipm.rate_above_hz`
(dark pulses with branching crosstalk whose height with noise crosses the threshold, plus Rice noise
firings).  Commands as :mod:`drivers.sim.counter`: ``[SENSe:]GATE:TIME``, ``ROUTe:TERMinals:CHANnel``,
``INITiate``, ``FETCh[:TOTalize]?`` (waits for the gate: G·time_scale real seconds).
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import STANDARD_ERRORS, format_float, parse_int, parse_number
from drivers.sim.sensor_rig import SensorRig
from drivers.sim.sipm import rate_above_hz
from drivers.sim.threshold import ThresholdDac

MAX_WAIT_S = 3600.0


class DarkCounter(SimInstrument):
    """The counter role of a sensor bench."""

    role = "counter"
    model = "LTS-CT2"

    def __init__(self, *, rig: SensorRig, threshold: ThresholdDac, **kwargs: object) -> None:
        self.rig = rig
        self.threshold = threshold
        self.gates = 0
        self.gate_s = 0.1
        self.channel = 1
        self.count: int | None = None
        self.gate_end = 0.0
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.gate_s = 0.1
        self.channel = 1
        self.count = None

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SENSe:]GATE:TIME", write=self._set_gate, query=lambda c: format_float(self.gate_s)
            ),
            command(
                "ROUTe:TERMinals:CHANnel",
                write=self._set_channel,
                query=lambda c: str(self.channel),
            ),
            command("INITiate[:IMMediate]", write=lambda c: self.start_gate(), max_params=0),
            command("FETCh[:TOTalize]", query=self._fetch),
        ]

    def _set_gate(self, call: Call) -> None:
        self.gate_s = parse_number(call.arg(), lo=1e-6, hi=1000.0)

    def _set_channel(self, call: Call) -> None:
        self.channel = parse_int(call.arg(), lo=1, hi=len(self.rig.spec.sensors))

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

    def _fetch(self, call: Call) -> str:
        if self.count is None:
            self.push_error(-230, STANDARD_ERRORS[-230])
            return "0"
        wait = self.gate_end - self.clock()
        if wait > 0:
            self.sleep(min(wait, MAX_WAIT_S))
        return str(self.count)
