"""Pulse generator: test-pulse amplitude, shape, rate, bursts, trigger and output."""

from __future__ import annotations

from drivers.roles.base import RoleDriver, check_finite, check_range, check_word

MAX_RATE_HZ = 1e9


class Pulser(RoleDriver):
    """Amplitudes in mV, times in ns, rates in Hz; sent to the instrument in V, s, Hz."""

    role = "pulser"

    def set_amplitude(self, mV: float) -> None:
        """Pulse amplitude in millivolts (negative for negative pulses)."""
        self._write("set_amplitude", volts=check_finite("mV", mV) * 1e-3)

    def amplitude_mV(self) -> float:
        return float(self._query("get_amplitude")) * 1e3

    def set_shape(
        self,
        *,
        width_ns: float | None = None,
        leading_ns: float | None = None,
        trailing_ns: float | None = None,
    ) -> None:
        """Pulse width and leading/trailing edge (transition) times in ns; ``None`` leaves one as is."""
        for op, name, value in (
            ("set_width", "width_ns", width_ns),
            ("set_leading_edge", "leading_ns", leading_ns),
            ("set_trailing_edge", "trailing_ns", trailing_ns),
        ):
            if value is not None:
                self._write(op, seconds=check_range(name, value, 0.0, 1e9) * 1e-9)

    def set_rate(self, hz: float) -> None:
        """Pulse repetition rate in Hz."""
        rate = check_range("hz", hz, 0.0, MAX_RATE_HZ)
        if rate <= 0:
            raise ValueError("hz must be above 0")
        self._write("set_frequency", hertz=rate)

    def set_period(self, ns: float) -> None:
        """Pulse period in ns (the rate is 1/period)."""
        period = check_range("ns", ns, 0.0, 1e12)
        if period <= 0:
            raise ValueError("ns must be above 0")
        self.set_rate(1e9 / period)

    def rate_hz(self) -> float:
        return float(self._query("get_frequency"))

    def set_burst(self, count: int) -> None:
        """``count`` pulses per trigger; 0 = continuous (burst mode off)."""
        if int(count) != count or count < 0:
            raise ValueError(f"count={count!r} must be a whole number >= 0")
        if count == 0:
            self._write("set_burst_state", state=False)
            return
        self._write("set_burst_count", count=int(count))
        self._write("set_burst_state", state=True)

    def set_trigger_source(self, source: str) -> None:
        """``IMMediate`` (free running), ``EXTernal`` or ``BUS`` (``*TRG``)."""
        self._write("set_trigger_source", source=check_word("source", source))

    def trigger(self) -> None:
        """Fire once (a bus trigger); never repeated by a retry."""
        self._write("trigger", reapply=False)

    def set_sine(self, *, hz: float, mV: float, offset_mV: float = 0.0) -> None:
        """Continuous sine of peak amplitude ``mV`` around ``offset_mV`` at ``hz`` (the digitizer
        tests); the pulses come back with :meth:`set_pulses`."""
        self.set_rate(hz)
        self.set_amplitude(check_range("mV", mV, 0.0, 1e5))
        self._write("set_offset", volts=check_finite("offset_mV", offset_mV) * 1e-3)
        self._write("set_function", shape="SINusoid")

    def set_pulses(self) -> None:
        """Back to test pulses (offset 0)."""
        self._write("set_function", shape="PULSe")
        self._write("set_offset", volts=0.0)

    def set_output(self, on: bool) -> None:
        self._set_output(bool(on))

    def output_on(self) -> bool:
        return bool(self._query("get_output"))
