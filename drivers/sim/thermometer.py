"""Simulated temperature sensor beside the light sensors.

``MEASure:TEMPerature?`` (SCPI-1999 MEASure subsystem) returns the temperature in °C: the sensor
file's ``temperature_C`` plus Gaussian noise of ``temperature_noise_C`` (seeded per reading).
"""

from __future__ import annotations

from collections.abc import Sequence

from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import format_float
from drivers.sim.sensor_rig import SensorRig


class Thermometer(SimInstrument):
    """The temperature role."""

    role = "temperature"
    model = "LTS-TS1"

    def __init__(self, *, rig: SensorRig, **kwargs: object) -> None:
        self.rig = rig
        self.readings = 0
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def commands(self) -> Sequence[Command]:
        return [command("MEASure:TEMPerature", query=self._measure)]

    def _measure(self, call: Call) -> str:
        self.readings += 1
        noise = self.rig.rng(self.instrument_id, self.readings).normal()
        return format_float(self.rig.temperature_C() + noise * self.rig.spec.temperature_noise_C)
