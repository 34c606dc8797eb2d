"""Temperature sensor beside the device under test (°C)."""

from __future__ import annotations

import math

from drivers.errors import ProtocolError
from drivers.roles.base import RoleDriver

#: Readings outside this range are not temperatures of a lab bench (an overrange code, a broken
#: probe): refused instead of used.
PLAUSIBLE_C = (-80.0, 150.0)


class Thermometer(RoleDriver):
    role = "temperature"

    def read_C(self) -> float:
        value = float(self._query("measure"))
        if not math.isfinite(value) or not PLAUSIBLE_C[0] <= value <= PLAUSIBLE_C[1]:
            raise ProtocolError(
                f"temperature reading {value!r} °C is outside {PLAUSIBLE_C[0]:g}.."
                f"{PLAUSIBLE_C[1]:g} °C (overrange or broken probe)",
                address=self.address,
            )
        return value
