"""Simulated bias supply: set point, real-time ramp, output, meters, interlock and current-limit trips.

The output voltage is computed from elapsed time, not by a thread: after a change of set point or
output state at time t₀ from voltage V₀, V(t) moves toward the set point at the slew rate
(``SOURce:VOLTage:SLEW``, V/s).  Output off drops the output to 0 V at once; output on starts the ramp
from 0 V.  Meters: ``MEASure:VOLTage[:DC]?`` = V(t) + noise (``bias_voltage_noise_mV``);
``MEASure:CURRent[:DC]?`` = V(t) / bias_resistance + offset + noise (``bias_current_offset_nA``,
``bias_current_noise_nA``).  The current limit trips the output off (``OUTPut:PROTection:TRIPped?``
1) when the leakage current exceeds it; ``OUTPut:PROTection:CLEar`` re-arms.  An ``interlock_open``
fault opens the interlock ``after_s`` after the output first turned on: the supply trips off and
``SYSTem:INTerlock:STATe?`` reads 0 from then on; switching on with the interlock open or while
tripped is -221 Settings conflict.

Keep-alive (``OUTPut:KEEPalive[:TIMeout] <s>``, this simulated supply's own command; 0 = off, the
``*RST`` default): while it is armed and the output is on, an interval of more than that many seconds
without any message (from any client) switches the output off at the moment the interval ran out --
what a runner that died leaves to the supply.

``*RST`` defaults: 0 V, 10 V/s, current limit 100 µA, output off.  Limits: 0 - 80 V,
0.01 - 1000 V/s, 1 nA - 10 mA, keep-alive 0 - 3600 s.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from drivers.sim.board import BoardSpec
from drivers.sim.instrument import Call, Command, SimInstrument, command
from drivers.sim.scpi_parser import format_float, parse_bool, parse_number, scpi_error
from drivers.timing import ramp_s

MAX_VOLTS = 80.0


@dataclass(kw_only=True)
class BiasSettings:
    """Programmed state of the supply."""

    setpoint_V: float = 0.0
    slew_V_per_s: float = 10.0
    limit_A: float = 100e-6
    output_on: bool = False
    tripped: bool = False
    ramp_from_V: float = 0.0
    ramp_t0: float = 0.0
    keep_alive_s: float = 0.0


class BiasSupply(SimInstrument):
    """The bias role."""

    role = "bias"
    model = "LTS-BS80"

    def __init__(self, *, board: BoardSpec, **kwargs: object) -> None:
        self.board = board
        self.settings = BiasSettings()
        self.first_on: float | None = None
        self.interlock_open = False
        self.readings = 0
        self.last_message: float | None = None
        self.keep_alive_lapses = 0
        faults = [f for f in board.faults_for("bias") if f.kind == "interlock_open"]
        self.interlock_after_s = min((f.after_s or 0.0 for f in faults), default=None)
        super().__init__(**kwargs)  # type: ignore[arg-type]

    def reset(self) -> None:
        self.update()
        self.settings = BiasSettings(tripped=self.interlock_open)

    # --- the physics of the output -------------------------------------------------------------
    def voltage_at(self, now: float) -> float:
        """Output voltage at clock time ``now`` (ramping toward the set point)."""
        s = self.settings
        if not s.output_on:
            return 0.0
        step = s.slew_V_per_s * max(0.0, now - s.ramp_t0)
        delta = s.setpoint_V - s.ramp_from_V
        return s.setpoint_V if abs(delta) <= step else s.ramp_from_V + math.copysign(step, delta)

    def leakage_A(self, volts: float) -> float:
        """Bias-line current through the board's leakage path: I = V / R."""
        return volts / (self.board.bias_resistance_Mohm * 1e6)

    def update(self) -> None:
        """Apply what time has brought: the interlock fault and a current-limit trip."""
        now = self.clock()
        s = self.settings
        if (
            self.interlock_after_s is not None
            and self.first_on is not None
            and now - self.first_on >= self.interlock_after_s
        ):
            self.interlock_open = True
        if s.output_on and (
            self.interlock_open or self.leakage_A(self.voltage_at(now)) > s.limit_A
        ):
            self._switch_off(now)
            s.tripped = True
        last = self.last_message
        if s.output_on and s.keep_alive_s > 0 and last is not None and now - last > s.keep_alive_s:
            self._switch_off(last + s.keep_alive_s)  # off when the keep-alive ran out
            self.keep_alive_lapses += 1

    def _restart_ramp(self, now: float) -> None:
        self.settings.ramp_from_V = self.voltage_at(now)
        self.settings.ramp_t0 = now

    def _switch_off(self, now: float) -> None:
        self.settings.output_on = False
        self.settings.ramp_from_V = 0.0
        self.settings.ramp_t0 = now

    def process(self, message: str) -> bytes | None:
        """Apply elapsed time (trips) before running a message, then run it."""
        self.update()
        self.last_message = self.clock()
        return super().process(message)

    # --- commands ------------------------------------------------------------------------------
    def commands(self) -> Sequence[Command]:
        return [
            command(
                "[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]",
                write=self._set_voltage,
                query=lambda c: format_float(self.settings.setpoint_V),
            ),
            command(
                "[SOURce:]VOLTage:SLEW",
                write=self._set_slew,
                query=lambda c: format_float(self.settings.slew_V_per_s),
            ),
            command(
                "[SOURce:]CURRent:LIMit[:LEVel]",
                write=self._set_limit,
                query=lambda c: format_float(self.settings.limit_A),
            ),
            command(
                "OUTPut[:STATe]",
                write=self._set_output,
                query=lambda c: self._flag(self.settings.output_on),
            ),
            command(
                "MEASure[:SCALar]:VOLTage[:DC]", query=lambda c: format_float(self.measure()[0])
            ),
            command(
                "MEASure[:SCALar]:CURRent[:DC]", query=lambda c: format_float(self.measure()[1])
            ),
            command(
                "SYSTem:INTerlock[:STATe]", query=lambda c: self._flag(not self.interlock_open)
            ),
            command("OUTPut:PROTection:TRIPped", query=lambda c: self._flag(self.settings.tripped)),
            command("OUTPut:PROTection:CLEar", write=self._clear_trip, max_params=0),
            command(
                "OUTPut:KEEPalive[:TIMeout]",
                write=self._set_keep_alive,
                query=lambda c: format_float(self.settings.keep_alive_s),
            ),
        ]

    @staticmethod
    def _flag(value: bool) -> str:
        return "1" if value else "0"

    def _set_voltage(self, call: Call) -> None:
        value = parse_number(call.arg(), lo=0.0, hi=MAX_VOLTS, default=0.0)
        self._restart_ramp(self.clock())
        if self.settings.output_on:  # accounted only: the output already follows the slew in time
            self.pace.spend("ramp", ramp_s(self.settings.ramp_from_V, value, self.settings.slew_V_per_s))
        self.settings.setpoint_V = value
        self.update()

    def _set_slew(self, call: Call) -> None:
        value = parse_number(call.arg(), lo=0.01, hi=1000.0, default=10.0)
        self._restart_ramp(self.clock())
        self.settings.slew_V_per_s = value

    def _set_limit(self, call: Call) -> None:
        self.settings.limit_A = parse_number(call.arg(), lo=1e-9, hi=10e-3, default=100e-6)
        self.update()

    def _set_output(self, call: Call) -> None:
        on = parse_bool(call.arg())
        now = self.clock()
        if not on:
            self._switch_off(now)
            return
        if self.interlock_open or self.settings.tripped:
            raise scpi_error(-221, "interlock open" if self.interlock_open else "tripped")
        if not self.settings.output_on:
            self.settings.output_on = True
            self.settings.ramp_from_V = 0.0
            self.settings.ramp_t0 = now
            self.pace.spend("ramp", ramp_s(0.0, self.settings.setpoint_V, self.settings.slew_V_per_s))
            if self.first_on is None:
                self.first_on = now
        self.update()

    def _set_keep_alive(self, call: Call) -> None:
        self.settings.keep_alive_s = parse_number(call.arg(), lo=0.0, hi=3600.0, default=0.0)

    def _clear_trip(self, call: Call) -> None:
        if self.interlock_open:
            raise scpi_error(-221, "interlock open")
        self.settings.tripped = False

    def measure(self) -> tuple[float, float]:
        """Meter readings now: (volts, amperes), with offset and noise."""
        self.readings += 1
        rng = np.random.default_rng([self.board.seed, self.instrument_id, self.readings])
        volts = self.voltage_at(self.clock())
        noise_v, noise_i = rng.standard_normal(2)
        measured_v = volts + noise_v * self.board.bias_voltage_noise_mV * 1e-3
        current = (
            self.leakage_A(volts)
            + self.board.bias_current_offset_nA * 1e-9
            + noise_i * self.board.bias_current_noise_nA * 1e-9
        )
        return measured_v, current
