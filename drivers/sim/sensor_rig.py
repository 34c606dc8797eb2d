"""What the simulated sensor instruments share: the sensor file, the bias supply's output, the
pulser driving the LED, and the temperature.

The simulated clock may run faster than real time: a gate or an acquisition of S simulated seconds
lasts S·``time_scale`` real seconds (``time_scale`` 0: at once).  The identity of each instrument
says so (``*IDN?`` model ends in ``-FAST`` when ``time_scale`` < 1), so a run records it.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from drivers.sim.bias import BiasSupply
from drivers.sim.pulser import Pulser
from drivers.sim.sensor import SensorSpec
from drivers.sim.sipm import overvoltage


class SensorRig:
    """The sensors under test as the instruments see them (one shared state)."""

    def __init__(
        self, spec: SensorSpec, *, bias: BiasSupply, pulser: Pulser, clock: Callable[[], float]
    ) -> None:
        self.spec = spec
        self.bias = bias
        self.pulser = pulser
        self.clock = clock

    def bias_V(self) -> float:
        """The bias supply's output now (ramps included)."""
        self.bias.update()
        return self.bias.voltage_at(self.clock())

    def temperature_C(self) -> float:
        """True temperature of the sensors (constant in this model)."""
        return self.spec.temperature_C

    def over_V(self, channel: int) -> float:
        """Overvoltage of sensor ``channel`` (1-based) now."""
        return overvoltage(self.spec.sensors[channel - 1], self.bias_V(), self.temperature_C())

    def rng(self, instrument_id: int, count: int) -> np.random.Generator:
        """A generator seeded by the file's seed, the instrument and its acquisition count."""
        return np.random.default_rng([self.spec.seed, instrument_id, count])

    def real_seconds(self, simulated_s: float) -> float:
        return simulated_s * self.spec.time_scale
