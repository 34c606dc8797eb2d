"""Simulated pulse-height analyser (multichannel analyser): a histogram of the readout pulse height
of one input over a number of triggers.

Commands (SCPI-1999 structure; values in V): ``[SENSe:]HISTogram:LOWer``, ``:UPPer`` (range),
``:BINS`` (16 - 16384), ``:EVENts`` (triggers per acquisition, 1 - 10⁷), ``:CHANnel`` (input, one per
sensor), ``TRIGger[:SEQuence]:SOURce EXTernal|COINcidence`` (the pulser's sync, i.e. one trigger per
LED pulse; or the coincidence of the first two sensors on a scintillator module), ``INITiate``,
``FETCh:HISTogram?`` (comma-separated counts per bin; waits for the acquisition) and
``FETCh:HISTogram:OUTSide?`` (events below and above the range).  ``*RST``: 0 to 0.2 V, 200 bins,
1000 events, channel 1, source EXTernal.

An acquisition of N external triggers lasts N / pulser frequency simulated seconds; with the pulser
output off there is no trigger and ``INITiate`` is -221 Settings conflict.  Heights per trigger come
from :mod:`drivers.sim.sipm` (LED: Poisson photoelectrons, branching crosstalk, noise); the
coincidence source comes from :mod:`drivers.sim.cosmics` when the sensor file has a plate.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import (
    STANDARD_ERRORS,
    format_float,
    parse_choice,
    parse_int,
    parse_number,
    scpi_error,
)
from drivers.sim.sensor_rig import SensorRig
from drivers.sim.sipm import (
    add_crosstalk,
    branching_lambda,
    height_per_cell_mV,
    heights_mV,
    led_mean_pe,
)

MAX_EVENTS = 10_000_000
MAX_WAIT_S = 3600.0
SOURCES = ("EXTernal", "COINcidence")

#: A trigger source: (rig, channel, events, rng) -> (heights in mV, simulated seconds it took).
EventSource = Callable[[SensorRig, int, int, np.random.Generator], tuple[np.ndarray, float]]


def led_events(
    rig: SensorRig, channel: int, events: int, rng: np.random.Generator
) -> tuple[np.ndarray, float]:
    """One trigger per LED pulse: Poisson primaries, crosstalk, readout noise."""
    pulser = rig.pulser.settings
    if not pulser.output_on:
        raise scpi_error(-221, "no external trigger: the pulser output is off")
    sipm = rig.spec.sensors[channel - 1]
    over = rig.over_V(channel)
    mu = led_mean_pe(rig.spec.led, pulser.amplitude_V, sipm.light_scale)
    cells = add_crosstalk(rng, rng.poisson(mu, events), branching_lambda(sipm, over))
    a1 = height_per_cell_mV(sipm, rig.spec.readout, over)
    return heights_mV(rng, cells, a1, sipm, rig.spec.readout), events / pulser.frequency_hz


class PulseHeightAnalyser(SimInstrument):
    """The mca role."""

    role = "mca"
    model = "LTS-MCA4K"

    def __init__(
        self, *, rig: SensorRig, sources: dict[str, EventSource] | None = None, **kwargs: object
    ) -> None:
        self.rig = rig
        self.sources: dict[str, EventSource] = {"EXTernal": led_events, **(sources or {})}
        self.acquisitions = 0
        self.reset()
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.lower_V, self.upper_V, self.bins, self.events = 0.0, 0.2, 200, 1000
        self.channel, self.source = 1, "EXTernal"
        self.counts: np.ndarray | None = None
        self.outside = (0, 0)
        self.done_at = 0.0

    def commands(self) -> Sequence[Command]:
        def volts(header: str, attr: str) -> Command:
            def setter(call: Call) -> None:
                setattr(self, attr, parse_number(call.arg(), lo=-10.0, hi=10.0))

            return command(header, write=setter, query=lambda c: format_float(getattr(self, attr)))

        return [
            volts("[SENSe:]HISTogram:LOWer", "lower_V"),
            volts("[SENSe:]HISTogram:UPPer", "upper_V"),
            command("[SENSe:]HISTogram:BINS", write=self._set_bins, query=lambda c: str(self.bins)),
            command(
                "[SENSe:]HISTogram:EVENts", write=self._set_events, query=lambda c: str(self.events)
            ),
            command(
                "[SENSe:]HISTogram:CHANnel",
                write=self._set_channel,
                query=lambda c: str(self.channel),
            ),
            command(
                "TRIGger[:SEQuence]:SOURce",
                write=self._set_source,
                query=lambda c: self.source[:4].upper(),
            ),
            command("INITiate[:IMMediate]", write=lambda c: self.acquire(), max_params=0),
            command("FETCh:HISTogram", query=self._fetch),
            command("FETCh:HISTogram:OUTSide", query=self._outside),
        ]

    def _set_bins(self, call: Call) -> None:
        self.bins = parse_int(call.arg(), lo=16, hi=16384)

    def _set_events(self, call: Call) -> None:
        self.events = parse_int(call.arg(), lo=1, hi=MAX_EVENTS)

    def _set_channel(self, call: Call) -> None:
        self.channel = parse_int(call.arg(), lo=1, hi=len(self.rig.spec.sensors))

    def _set_source(self, call: Call) -> None:
        source = parse_choice(call.arg(), SOURCES)
        if source not in self.sources:
            raise scpi_error(-221, f"no {source} trigger on this bench")
        self.source = source

    def acquire(self) -> None:
        """Draw one acquisition's heights and histogram them."""
        if self.upper_V <= self.lower_V:
            raise scpi_error(-221, "histogram upper limit must exceed the lower")
        self.acquisitions += 1
        rng = self.rig.rng(self.instrument_id, self.acquisitions)
        heights, took_s = self.sources[self.source](self.rig, self.channel, self.events, rng)
        volts = heights * 1e-3
        self.counts, _ = np.histogram(volts, bins=self.bins, range=(self.lower_V, self.upper_V))
        self.outside = (
            int(np.count_nonzero(volts < self.lower_V)),
            int(np.count_nonzero(volts >= self.upper_V)),
        )
        self.done_at = self.clock() + self.rig.real_seconds(took_s)

    def _wait(self) -> np.ndarray:
        if self.counts is None:
            raise scpi_error(-230, STANDARD_ERRORS[-230])
        wait = self.done_at - self.clock()
        if wait > 0:
            self.sleep(min(wait, MAX_WAIT_S))
        return self.counts

    def _fetch(self, call: Call) -> str:
        return ",".join(str(int(n)) for n in self._wait())

    def _outside(self, call: Call) -> str:
        self._wait()
        return f"{self.outside[0]},{self.outside[1]}"
