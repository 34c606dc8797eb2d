"""Simulated pulse generator: the test pulse injected into the board (through the channel switch).

Settings (SI units on the wire) and their ``*RST`` defaults: amplitude 0.1 V (±5 V), width 10 ns,
leading/trailing edges 1 ns, frequency 1 kHz (1 mHz - 1 GHz: a generator's sine range, so the
effective bandwidth of a digitizer can be scanned past its corner), burst of 1 cycle, burst off, trigger
source IMMediate, output off, function PULSe, offset 0 V (±5 V).  The board treats the pulse as a
charge injection: its width and edges are kept and reported but do not change the board's pulse
shape.  ``*TRG`` counts bus triggers.

Sine mode (``SOURce:FUNCtion:SHAPe SINusoid``): a continuous sine of peak amplitude ``AMPLitude``
(not peak-to-peak) around ``SOURce:VOLTage:LEVel:IMMediate:OFFSet`` at ``FREQuency``, fed straight
into every scope input (the digitizer under test, :mod:`drivers.sim.converter`); no test pulses
reach the board or the counters meanwhile.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from drivers.sim.instrument import Call, Command, Handler, SimInstrument, command
from drivers.sim.scpi_parser import format_float, parse_bool, parse_choice, parse_int, parse_number

TRIGGER_SOURCES = ("IMMediate", "EXTernal", "BUS")
FUNCTIONS = ("PULSe", "SINusoid")


@dataclass(kw_only=True)
class PulserSettings:
    """What the pulser is set to."""

    amplitude_V: float = 0.1
    width_s: float = 10e-9
    leading_s: float = 1e-9
    trailing_s: float = 1e-9
    frequency_hz: float = 1e3
    burst_count: int = 1
    burst_on: bool = False
    trigger_source: str = "IMMediate"
    output_on: bool = False
    bus_triggers: int = 0
    function: str = "PULSe"
    offset_V: float = 0.0


class Pulser(SimInstrument):
    """The pulser role."""

    role = "pulser"
    model = "LTS-PG2"

    def __init__(self, **kwargs: object) -> None:
        self.settings = PulserSettings()
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.settings = PulserSettings()

    @property
    def amplitude_mV(self) -> float:
        """Test pulse amplitude in mV."""
        return self.settings.amplitude_V * 1e3

    def trials(self, gate_s: float) -> int:
        """Pulses sent during a counter gate of ``gate_s``: burst count, or frequency × gate."""
        if not self.settings.output_on or self.sine_on:
            return 0
        if self.settings.burst_on:
            return self.settings.burst_count
        return int(self.settings.frequency_hz * gate_s + 1e-9)

    @property
    def sine_on(self) -> bool:
        """True while the output carries the continuous sine."""
        return self.settings.output_on and self.settings.function == "SINusoid"

    def _number_field(self, name: str, lo: float, hi: float) -> tuple[Handler, Handler]:
        def write(call: Call) -> None:
            setattr(self.settings, name, parse_number(call.arg(), lo=lo, hi=hi))

        return write, lambda call: format_float(getattr(self.settings, name))

    def commands(self) -> Sequence[Command]:
        amp = self._number_field("amplitude_V", -5.0, 5.0)
        width = self._number_field("width_s", 1e-9, 1e-3)
        lead = self._number_field("leading_s", 1e-10, 1e-3)
        trail = self._number_field("trailing_s", 1e-10, 1e-3)
        freq = self._number_field("frequency_hz", 1e-3, 1e9)
        offset = self._number_field("offset_V", -5.0, 5.0)
        return [
            command("[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]", write=amp[0], query=amp[1]),
            command(
                "[SOURce:]VOLTage[:LEVel][:IMMediate]:OFFSet", write=offset[0], query=offset[1]
            ),
            command(
                "[SOURce:]FUNCtion[:SHAPe]",
                write=self._set_function,
                query=lambda c: self.settings.function[:4].upper(),
            ),
            command("[SOURce:]PULSe:WIDTh", write=width[0], query=width[1]),
            command("[SOURce:]PULSe:TRANsition[:LEADing]", write=lead[0], query=lead[1]),
            command("[SOURce:]PULSe:TRANsition:TRAiling", write=trail[0], query=trail[1]),
            command("[SOURce:]FREQuency[:CW]", write=freq[0], query=freq[1]),
            command(
                "[SOURce:]BURSt:NCYCles",
                write=self._set_burst_count,
                query=lambda c: str(self.settings.burst_count),
            ),
            command(
                "[SOURce:]BURSt[:STATe]",
                write=self._set_burst_state,
                query=lambda c: "1" if self.settings.burst_on else "0",
            ),
            command(
                "TRIGger[:SEQuence]:SOURce",
                write=self._set_trigger_source,
                query=lambda c: self.settings.trigger_source[:3].upper(),
            ),
            command(
                "OUTPut[:STATe]",
                write=self._set_output,
                query=lambda c: "1" if self.settings.output_on else "0",
            ),
        ]

    def common_commands(self) -> dict[str, tuple[Handler | None, Handler | None]]:
        return {"*TRG": (self._bus_trigger, None)}

    def _set_function(self, call: Call) -> None:
        self.settings.function = parse_choice(call.arg(), FUNCTIONS)

    def _set_burst_count(self, call: Call) -> None:
        self.settings.burst_count = parse_int(call.arg(), lo=1, hi=10**9)

    def _set_burst_state(self, call: Call) -> None:
        self.settings.burst_on = parse_bool(call.arg())

    def _set_trigger_source(self, call: Call) -> None:
        self.settings.trigger_source = parse_choice(call.arg(), TRIGGER_SOURCES)

    def _set_output(self, call: Call) -> None:
        self.settings.output_on = parse_bool(call.arg())

    def _bus_trigger(self, call: Call) -> None:
        self.settings.bus_triggers += 1
