"""Simulated threshold DAC: one discriminator threshold per board channel.

``SOURce<n>:VOLTage[:LEVel][:IMMediate][:AMPLitude] <V>`` sets channel n (1 .. channels, -114 outside)
within ±2.5 V (-222 outside); ``*RST`` sets every level to 0 V.
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import format_float, parse_number

MAX_LEVEL_V = 2.5


class ThresholdDac(SimInstrument):
    """The threshold role."""

    role = "threshold"
    model = "LTS-TD99"

    def __init__(self, *, channels: int, **kwargs: object) -> None:
        self.channels = channels
        self.levels_V = [0.0] * channels
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.levels_V = [0.0] * self.channels

    def level_mV(self, channel: int) -> float:
        """Threshold of board channel ``channel`` in mV."""
        return self.levels_V[channel - 1] * 1e3

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SOURce#:]VOLTage[:LEVel][:IMMediate][:AMPLitude]",
                write=self._set,
                query=self._get,
            )
        ]

    def _set(self, call: Call) -> None:
        channel = call.suffix(0, hi=self.channels)
        self.levels_V[channel - 1] = parse_number(
            call.arg(), lo=-MAX_LEVEL_V, hi=MAX_LEVEL_V, default=0.0
        )

    def _get(self, call: Call) -> str:
        return format_float(self.levels_V[call.suffix(0, hi=self.channels) - 1])
