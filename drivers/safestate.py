"""A bias supply brought to its safe state from outside a run: read, ramp down, off, read back.

For ``benchwright safe --bench FILE`` (after a crash, a kill, a dead PC: nothing else is driving the
bench) and for ``benchwright instruments``, which shows each supply's output state.

CAUTION: bias supplies can hurt people.  This module only does what software can: it ramps the set
point to 0 V at the bench file's permitted rate, switches the output off and reads both back.  It
never trusts a reading it cannot believe (the role refuses NaN, 9.91E+37 and values beyond the
bench limits): then the output is switched off at once and the result says the state is not
confirmed.  Local codes, the lab's safety rules and qualified personnel decide what comes next.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

from drivers.errors import BenchwrightError, ImplausibleReading
from drivers.roles.bias import BiasSupply

#: The output counts as at 0 V within this (the engine's ramp tolerance, records.py).
DEFAULT_TOLERANCE_V = 0.1
DEFAULT_POLL_S = 0.05
#: Time allowed beyond max_volts / rate before the ramp-down counts as stuck.
DEFAULT_MARGIN_S = 5.0
#: Common practice: a supply's slew is within tens of per cent of what was programmed.
RAMP_TIME_FACTOR = 1.5


@dataclass(frozen=True, kw_only=True)
class SupplyState:
    """What a supply reports: output state, measured voltage and set point."""

    output_on: bool
    volts: float
    setpoint_V: float

    def is_safe(self, tolerance_V: float = DEFAULT_TOLERANCE_V) -> bool:
        return not self.output_on and abs(self.volts) <= tolerance_V

    def __str__(self) -> str:
        volts = 0.0 if abs(self.volts) < 0.0005 else self.volts  # no "-0.000 V" from meter noise
        return (
            f"output {'ON' if self.output_on else 'off'}, {volts:.3f} V "
            f"(set point {self.setpoint_V:g} V)"
        )


def read_supply_state(bias: BiasSupply) -> SupplyState:
    """Output state, voltage and set point, each reading checked by the role."""
    return SupplyState(
        output_on=bias.output_on(), volts=bias.voltage(), setpoint_V=bias.setpoint()
    )


@dataclass(frozen=True, kw_only=True)
class SafeOutcome:
    """What :func:`make_supply_safe` found, did and read back for one supply."""

    before: SupplyState | None
    after: SupplyState | None
    actions: tuple[str, ...]
    problem: str = ""  # why the safe state is not confirmed; '' when it is

    @property
    def safe(self) -> bool:
        return not self.problem


@dataclass(frozen=True, kw_only=True)
class SafeSettings:
    """How the ramp-down is done; the rate is the bench file's ``max_ramp_V_per_s``."""

    tolerance_V: float = DEFAULT_TOLERANCE_V
    poll_s: float = DEFAULT_POLL_S
    margin_s: float = DEFAULT_MARGIN_S


class _Down:
    """One supply's way down; ``actions`` collects what was done, in order."""

    def __init__(
        self, bias: BiasSupply, settings: SafeSettings, should_stop: Callable[[], bool]
    ) -> None:
        self.bias = bias
        self.settings = settings
        self.should_stop = should_stop
        self.actions: list[str] = []
        assert bias.max_volts is not None and bias.max_ramp_V_per_s is not None
        self.rate = bias.max_ramp_V_per_s
        self.max_volts = bias.max_volts

    def ramp_down(self) -> None:
        """Set point to 0 V at the permitted rate, then wait for the meter to follow; the wait is
        bounded by the bench's whole range over the rate, and ends early on a stop request."""
        tol = self.settings.tolerance_V
        self.bias.start_ramp(0.0, self.rate)
        allowed = self.max_volts / self.rate * RAMP_TIME_FACTOR + self.settings.margin_s
        deadline = time.monotonic() + allowed
        while True:
            volts = self.bias.voltage()
            self.bias.follow_ramp(volts)  # a supply without a slew command is stepped down here
            if abs(volts) <= tol:
                self.bias.end_ramp()
                self.actions.append(f"ramped down at {self.rate:g} V/s to {volts:.3f} V")
                return
            if self.should_stop():
                self.actions.append(f"ramp-down cut short by a stop request at {volts:.3f} V")
                return
            if time.monotonic() > deadline:
                self.actions.append(
                    f"ramp-down stuck at {volts:.3f} V after {allowed:.1f} s: output off at once"
                )
                return
            time.sleep(self.settings.poll_s)

    def switch_off(self) -> None:
        self.bias.set_output(False)
        self.actions.append("output off")

    def zero_setpoint(self) -> None:
        """With the output off the set point goes to 0 V, so a later switch-on cannot jump."""
        self.bias.start_ramp(0.0, self.rate)
        self.actions.append("set point 0 V")


def make_supply_safe(
    bias: BiasSupply,
    *,
    settings: SafeSettings | None = None,
    should_stop: Callable[[], bool] = lambda: False,
) -> SafeOutcome:
    """Read the supply, ramp it to 0 V at the bench's rate, switch it off, read it back.

    The output is switched off in every case (also when it reads off: an output state that
    contradicts the meter is not believed).  An implausible reading or an instrument fault switches
    the output off at once and is reported as the problem.
    """
    how = settings or SafeSettings()
    down = _Down(bias, how, should_stop)
    before: SupplyState | None = None
    try:
        before = read_supply_state(bias)
        if before.output_on or abs(before.volts) > how.tolerance_V:
            down.ramp_down()
        down.switch_off()
        down.zero_setpoint()
        after = read_supply_state(bias)
    except BenchwrightError as exc:
        return _off_after_fault(bias, down, before, exc)
    problem = "" if after.is_safe(how.tolerance_V) else f"reads {after} after switching off"
    return SafeOutcome(before=before, after=after, actions=tuple(down.actions), problem=problem)


def _off_after_fault(
    bias: BiasSupply, down: _Down, before: SupplyState | None, fault: BenchwrightError
) -> SafeOutcome:
    what = "implausible reading" if isinstance(fault, ImplausibleReading) else "instrument fault"
    down.actions.append(f"{what}: {fault}")
    try:
        down.switch_off()
        after = read_supply_state(bias)
    except BenchwrightError as exc:
        return SafeOutcome(
            before=before,
            after=None,
            actions=tuple(down.actions),
            problem=f"output off not confirmed ({exc})",
        )
    problem = "" if after.is_safe(down.settings.tolerance_V) else f"reads {after}"
    return SafeOutcome(before=before, after=after, actions=tuple(down.actions), problem=problem)
