"""Bias / high-voltage supply, with the bench file's limits enforced before anything is sent.

A supply without a slew command (``set_ramp_rate: absent`` in its dialect) is ramped here in
software at the permitted rate; every ramp is watched for a read-back running ahead of the commanded
rate (:mod:`drivers.roles.ramp`).

CAUTION: bias supplies can hurt people.  This driver only refuses requests above the bench file's
``max_volts``, ``max_ramp_V_per_s`` and ``max_current_uA``; the interlock, acknowledgement and ramp-down
on abort belong to the runner.  After a reconnect the SCPI layer re-applies the setpoint and ramp rate
but never switches the output back on.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING

from drivers.dialect import Dialect
from drivers.errors import RampRunaway, SafetyLimitError
from drivers.roles.base import RoleDriver, check_finite
from drivers.roles.ramp import RampPlan
from drivers.roles.readings import check_reading, plausible_volts
from drivers.scpi.session import ScpiSession

#: A read-back this recent (s) is where a supply-driven ramp starts from (the runner reads one just
#: before each ramp); an older one is not trusted as the start.
FRESH_READING_S = 2.0

if TYPE_CHECKING:
    from drivers.benchfile import InstrumentSpec


class BiasSupply(RoleDriver):
    """Volts, V/s and µA in the API; V, V/s and A on the wire."""

    role = "bias"
    tracks_settings = False  # a safety decision reads the supply back; nothing is skipped

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
        #: No slew command (declared absent): the driver ramps in software, see :meth:`follow_ramp`.
        self.software_ramp = not dialect.has("bias", "set_ramp_rate")
        #: False when the dialect declares the interlock unreadable; the bench file then names the
        #: hardware interlock on the inhibit input (``hardware_interlock``), acknowledged per run.
        self.interlock_readable = dialect.has("bias", "interlock_closed")
        self.hardware_interlock = spec.hardware_interlock if spec else ""
        self._ramp: RampPlan | None = None
        self._last_V: tuple[float, float] | None = None  # (volts, when) of the last read-back

    def start_ramp(self, volts: float, rate_V_per_s: float) -> None:
        """Set the ramp rate, then the target voltage; returns at once (the supply ramps).

        Without a slew command (software ramp) nothing moves yet: each :meth:`follow_ramp` sends
        the set point the ramp has reached by then (with the output off the set point is sent at
        once: nothing is live, and an output switched on later must find it where it was put).
        """
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
            if self.software_ramp:
                if not self.output_on():  # nothing is live: the set point may move at once
                    self._ramp = None
                    self._write("set_voltage", volts=target)
                    return
                start = self.setpoint()
                self._ramp = RampPlan(start=start, target=target, rate=rate, t0=time.monotonic())
                return
            self._write("set_ramp_rate", volts_per_s=rate)
            self._write("set_voltage", volts=target)
            # watched from the last read-back (the runner reads the voltage before each ramp);
            # without one there is nothing to measure the ramp against
            now = time.monotonic()
            last = self._last_V
            fresh = last is not None and now - last[1] <= FRESH_READING_S
            self._ramp = (
                RampPlan(start=last[0], target=target, rate=rate, t0=now) if fresh else None
            )

    def follow_ramp(self, measured_V: float) -> None:
        """Called with each read-back while a ramp runs: a read-back ahead of the commanded rate
        (moving away from 0 V) raises :class:`RampRunaway`; a software ramp sends its next set
        point.  Does nothing when no ramp was started."""
        plan = self._ramp
        if plan is None:
            return
        now = time.monotonic()
        if plan.runs_ahead(measured_V, now):
            self._ramp = None
            raise RampRunaway(
                f"bias at {self.address}: read-back {measured_V:.3f} V is ahead of the commanded "
                f"ramp ({plan.position(now):.3f} V at {plan.rate:g} V/s from {plan.start:g} V); "
                "the supply is not ramping as commanded",
                address=self.address,
            )
        if self.software_ramp:
            self._write("set_voltage", volts=round(plan.position(now), 6))

    def end_ramp(self) -> None:
        """The ramp reached its target within the runner's tolerance: a software ramp sends the
        target itself (the last step, no larger than that tolerance); the plan is dropped."""
        plan, self._ramp = self._ramp, None
        if plan is not None and self.software_ramp:
            self._write("set_voltage", volts=plan.target)

    def setpoint(self) -> float:
        """The programmed voltage in V (checked: see :meth:`voltage`)."""
        return self._reading("get_voltage_setpoint", "set point", "V", self._plausible_V)

    def ramp_rate(self) -> float:
        return self._reading("get_ramp_rate", "ramp rate", "V/s", None)

    def voltage(self) -> float:
        """The measured output voltage in V; NaN, infinity, SCPI's 9.91E+37 or a value beyond the
        bench's ``max_volts`` plus a margin raise ``ImplausibleReading``."""
        volts = self._reading("measure_voltage", "voltage", "V", self._plausible_V)
        self._last_V = (volts, time.monotonic())
        return volts

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
        """True when the hardware interlock is closed (safe to go live).  A supply whose dialect
        declares the interlock unreadable raises :class:`SafetyLimitError`: its state is never
        guessed (the runner relies on the bench's declared hardware interlock instead)."""
        if not self.interlock_readable:
            raise SafetyLimitError(
                f"bias at {self.address}: the interlock cannot be read (declared absent in the "
                "dialect); nothing may stand in for it",
                address=self.address,
            )
        return bool(self._query("interlock_closed"))

    def tripped(self) -> bool:
        """True when the over-current / over-voltage protection has tripped."""
        return bool(self._query("tripped"))

    @property
    def keep_alive_available(self) -> bool:
        """True when the dialect declares the supply's own keep-alive (``set_keep_alive``): the
        supply switches its output off when no command arrives within the given time."""
        return self.dialect.has("bias", "set_keep_alive")

    def set_keep_alive(self, seconds: float) -> None:
        """Arm the supply's keep-alive for ``seconds`` (0 disarms it); re-applied after a
        reconnect like any setting."""
        value = check_finite("seconds", seconds)
        if value < 0:
            raise ValueError("seconds must be 0 (off) or above")
        self._write("set_keep_alive", seconds=value)

    def clear_trip(self) -> None:
        self._write("clear_trip", reapply=False)
