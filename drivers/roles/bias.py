"""Bias / high-voltage supply, with the bench file's limits enforced before anything is sent.

CAUTION: bias supplies can hurt people.  This driver only refuses requests above the bench file's
``max_volts``, ``max_ramp_V_per_s`` and ``max_current_uA``; the interlock, acknowledgement and ramp-down
on abort belong to the runner.  After a reconnect the SCPI layer re-applies the setpoint and ramp rate
but never switches the output back on.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from drivers.dialect import Dialect
from drivers.errors import SafetyLimitError
from drivers.roles.base import RoleDriver, check_finite
from drivers.roles.readings import check_reading, plausible_volts
from drivers.scpi.session import ScpiSession

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec


class BiasSupply(RoleDriver):
    """Volts, V/s and µA in the API; V, V/s and A on the wire."""

    role = "bias"

    def __init__(
        self, session: ScpiSession, dialect: Dialect, spec: InstrumentSpec | None = None
    ) -> None:
        super().__init__(session, dialect, spec)
        self.max_volts = spec.max_volts if spec else None
        self.max_ramp_V_per_s = spec.max_ramp_V_per_s if spec else None
        self.max_current_uA = spec.max_current_uA if spec else None
        if self.max_volts is None or self.max_ramp_V_per_s is None:
            raise SafetyLimitError(
                f"bias at {session.address}: the bench file must give max_volts and max_ramp_V_per_s"
            )

    def start_ramp(self, volts: float, rate_V_per_s: float) -> None:
        """Set the ramp rate, then the target voltage; returns at once (the supply ramps)."""
        target = check_finite("volts", volts)
        rate = check_finite("rate_V_per_s", rate_V_per_s)
        assert self.max_volts is not None and self.max_ramp_V_per_s is not None
        if abs(target) > self.max_volts:
            raise SafetyLimitError(
                f"bias: {target:g} V is above the bench limit of {self.max_volts:g} V; nothing sent"
            )
        if not 0 < rate <= self.max_ramp_V_per_s:
            raise SafetyLimitError(
                f"bias: ramp {rate:g} V/s is outside 0..{self.max_ramp_V_per_s:g} V/s; nothing sent"
            )
        with self.session.lock:
            self._write("set_ramp_rate", volts_per_s=rate)
            self._write("set_voltage", volts=target)

    def setpoint(self) -> float:
        """The programmed voltage in V (checked: see :meth:`voltage`)."""
        return self._reading("get_voltage_setpoint", "set point", "V", self._plausible_V)

    def ramp_rate(self) -> float:
        return self._reading("get_ramp_rate", "ramp rate", "V/s", None)

    def voltage(self) -> float:
        """The measured output voltage in V; NaN, infinity, SCPI's 9.91E+37 or a value beyond the
        bench's ``max_volts`` plus a margin raise ``ImplausibleReading``."""
        return self._reading("measure_voltage", "voltage", "V", self._plausible_V)

    def current_A(self) -> float:
        """The measured output current in A; NaN, infinity or 9.91E+37 raise ``ImplausibleReading``."""
        return self._reading("measure_current", "current", "A", None)

    @property
    def _plausible_V(self) -> float:
        assert self.max_volts is not None
        return plausible_volts(self.max_volts)

    def _reading(self, op: str, what: str, unit: str, bound: float | None) -> float:
        return check_reading(
            f"bias {what}",
            self._query(op),
            bound=bound,
            unit=unit,
            address=self.address,
            command=self._command(op),
        )

    def set_current_limit(self, uA: float) -> None:
        limit = check_finite("uA", uA)
        if limit <= 0:
            raise ValueError("uA must be above 0")
        if self.max_current_uA is not None and limit > self.max_current_uA:
            raise SafetyLimitError(
                f"bias: current limit {limit:g} µA is above the bench limit of {self.max_current_uA:g} µA; nothing sent"
            )
        self._write("set_current_limit", amps=limit * 1e-6)

    def set_output(self, on: bool) -> None:
        """Output on or off; ON is never repeated by a retry or a reconnect."""
        self._set_output(bool(on))

    def output_on(self) -> bool:
        return bool(self._query("get_output"))

    def interlock_closed(self) -> bool:
        """True when the hardware interlock is closed (safe to go live)."""
        return bool(self._query("interlock_closed"))

    def tripped(self) -> bool:
        """True when the over-current / over-voltage protection has tripped."""
        return bool(self._query("tripped"))

    def clear_trip(self) -> None:
        self._write("clear_trip", reapply=False)
