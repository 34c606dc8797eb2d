"""Simulated bias supply with a source-measure unit's command structure (board file
``command_sets: {bias: sourcemeter}``); the physics is the generic supply's (:mod:`drivers.sim.bias`).

=========================================  ==================================================
``[SOURce:]VOLTage[:LEVel] <V>`` / ``?``   set point; there is no slew command: the output
                                           settles at ``SETTLE_V_PER_S`` (a jump, for a ramp)
``SENSe:CURRent:PROTection <A>`` / ``?``   compliance: above it the output trips off
``OUTPut ON|OFF`` / ``OUTPut?``            ``ON`` / ``OFF`` (words, not 1/0)
``READ?``                                  ``volts,amps,ohms,seconds,status`` -- one reading; the
                                           resistance element is 9.91E+37 (not measured)
``STATus:OPERation:CONDition?``            bit 10 (1024) set while the interlock is closed
``STATus:QUEStionable:CONDition?``         bit 3 (8) set while the output is tripped
``OUTPut:PROTection:CLEar``                re-arm after a trip
=========================================  ==================================================
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.sim.bias import BiasSettings, BiasSupply
from drivers.sim.instrument import Call, Command, command
from drivers.sim.scpi_parser import format_float, parse_bool, parse_number

#: How fast the output follows a new set point without a slew command (V/s): effectively a jump.
SETTLE_V_PER_S = 1e4
INTERLOCK_BIT = 10
TRIP_BIT = 3
NOT_MEASURED = 9.91e37  # SCPI-1999 vol. 1 §7.2.1 not-a-number (from memory)


class SourceMeterBias(BiasSupply):
    """The bias role as a source-measure unit."""

    model = "LTS-SM2"

    def reset(self) -> None:
        super().reset()
        self.settings = BiasSettings(tripped=self.interlock_open, slew_V_per_s=SETTLE_V_PER_S)

    def __init__(self, **kwargs: object) -> None:
        super().__init__(**kwargs)  # type: ignore[arg-type]
        self.settings.slew_V_per_s = SETTLE_V_PER_S

    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SOURce:]VOLTage[:LEVel]",
                write=self._set_voltage,
                query=lambda c: format_float(self.settings.setpoint_V),
            ),
            command(
                "SENSe:CURRent:PROTection[:LEVel]",
                write=self._set_limit,
                query=lambda c: format_float(self.settings.limit_A),
            ),
            command(
                "OUTPut[:STATe]",
                write=self._set_output,
                query=lambda c: "ON" if self.settings.output_on else "OFF",
            ),
            command("READ", query=self._read),
            command("STATus:OPERation:CONDition", query=lambda c: str(self._operation())),
            command("STATus:QUEStionable:CONDition", query=lambda c: str(self._questionable())),
            command("OUTPut:PROTection:CLEar", write=self._clear_trip, max_params=0),
        ]

    def _set_output(self, call: Call) -> None:
        parse_bool(call.arg())  # ON/OFF/1/0, checked
        super()._set_output(call)

    def _read(self, call: Call) -> str:
        volts, amps = self.measure()
        status = self._questionable()
        values = [volts, amps, NOT_MEASURED, self.clock(), float(status)]
        return ",".join(format_float(v) for v in values)

    def _operation(self) -> int:
        return (0 if self.interlock_open else 1) << INTERLOCK_BIT

    def _questionable(self) -> int:
        return (1 if self.settings.tripped else 0) << TRIP_BIT

    def _set_limit(self, call: Call) -> None:
        self.settings.limit_A = parse_number(call.arg(), lo=1e-9, hi=10e-3, default=100e-6)
        self.update()
