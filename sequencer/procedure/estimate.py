"""Time estimates of planned steps, following the bench state through the plan.

The figures come from the timing model the simulator paces itself by (:mod:`drivers.timing`), so
``benchwright plan`` and a simulated run's bench clock agree:

* ``scope.capture``: ``averages`` acquisitions, each the longer of the record (points / sample rate)
  and the trigger period (1 / pulser rate) plus the scope's re-arm time; one message to start it,
  then per input the data query and the block's transfer (points x 2 bytes), and the preamble
  query too unless a capture since the last scope setting has read it (the driver keeps it,
  drivers/roles/preamble_cache.py); with ``target_uncertainty`` or ``noise_target`` that many
  times ``max_captures`` (an upper bound);
* ``counter.count``: the gate time and two messages; ``bias.ramp``: |V - previous setpoint| / rate
  plus a settling check; ``switch.route``/``inject``: one message and the relays' settling;
* ``wait``: its time; ``prompt``: a typical operator reply; analysis: a few milliseconds;
* any other configuring step: one message (the error query travels in it, drivers/scpi/messages.py);
  a setting equal to the one already made costs nothing (the driver skips it).

The defaults describe a LAN bench (drivers/timing.py); ``plan --sim BOARD.yaml`` takes the board
file's ``timing:`` section, ``--timing-from RUN`` the durations of a recorded run.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from drivers.timing import DEFAULT_TIMING, BenchTiming, acquisition_s, ramp_s, transfer_s

from .plan_model import Plan, PlannedStep

DEFAULT_PROMPT_S = 10.0
DEFAULT_ANALYSIS_S = 0.005
DEFAULT_BIAS_SETTLE_S = 0.5


@dataclass(frozen=True, kw_only=True)
class EstimateSettings:
    """Assumptions of the estimate: the bench's timing model and what software adds."""

    timing: BenchTiming = DEFAULT_TIMING
    bytes_per_sample: int = 2
    prompt_s: float = DEFAULT_PROMPT_S
    analysis_s: float = DEFAULT_ANALYSIS_S
    bias_settle_s: float = DEFAULT_BIAS_SETTLE_S

    def message_s(self, role: str) -> float:
        """One program message to ``role`` and its reply."""
        return self.timing.of(role).round_trip_s


@dataclass
class _Bench:
    """What the estimate tracks (defaults before any step sets them)."""

    sample_rate: float = 1e9
    points: int = 1000
    averages: int = 1
    pulse_rate: float = 1e3
    gate: float = 1.0
    coincidence_gate: float = 0.1
    bias_volts: float = 0.0
    made: dict[str, Any] = field(default_factory=dict)  # step kind -> the last setting made
    preamble_kept: bool = False  # a capture read the preamble since the last scope setting


Rule = Callable[[EstimateSettings, _Bench, dict[str, Any]], float]


def _capture(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    scope = s.timing.of("scope")
    acquire = acquisition_s(averages=b.averages, points=b.points, sample_rate_hz=b.sample_rate,
                            trigger_rate_hz=b.pulse_rate, rearm_s=scope.rearm_s)  # fmt: skip
    per_input = scope.round_trip_s + transfer_s(b.points * s.bytes_per_sample, scope)
    inputs = len(args.get("inputs", (1,)))
    one = acquire + scope.round_trip_s + inputs * per_input
    preambles = 0 if b.preamble_kept else inputs * scope.round_trip_s
    b.preamble_kept = True
    return _captures(args) * one + preambles


def _captures(args: dict[str, Any]) -> int:
    """Captures of one ``scope.capture``: one, or with ``target_uncertainty`` or ``noise_target``
    its ``max_captures`` (the most it may take: the estimate is an upper bound there)."""
    if float(args.get("target_uncertainty") or 0.0) > 0.0:
        return int(args.get("max_captures") or 16)
    if float(args.get("noise_target") or 0.0) > 0.0:
        return int(args.get("max_captures") or 8)
    return 1


def _ramp(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    volts, rate = float(args["volts"]), float(args.get("rate") or 0.0)
    took = ramp_s(b.bias_volts, volts, rate)
    b.bias_volts = volts
    return took + s.bias_settle_s


def _setting(role: str, apply: Callable[[_Bench, dict[str, Any]], None]) -> Rule:
    """A configuring step: one message, nothing when it repeats the last setting of its kind."""

    def rule(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
        key = f"{role}:{sorted(args.items())!r}"
        if b.made.get(role) == key:
            return 0.0
        b.made[role] = key
        apply(b, args)
        return s.message_s(role.split(".", 1)[0])

    return rule


def _set(attr: str, name: str, kind: type) -> Callable[[_Bench, dict[str, Any]], None]:
    return lambda b, a: setattr(b, attr, kind(a[name]))


def _timebase(b: _Bench, args: dict[str, Any]) -> None:
    b.sample_rate, b.points = float(args["sample_rate"]), int(args["points"])


def _relay(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    switch = s.timing.of("switch")
    return switch.round_trip_s + switch.relay_settle_s


#: Gates an adaptive S-curve typically takes after its coarse look: 4-5 on simulated boards at
#: the fixed grid's uncertainties (tests/integration/test_adaptive_scans.py); 6 allows for more.
TYPICAL_SCAN_GATES = 6


def _scan_gates(args: dict[str, Any]) -> int:
    return min(int(args.get("max_gates") or 60), int(args.get("coarse") or 5) + TYPICAL_SCAN_GATES)


_RULES: dict[str, Rule] = {
    "scope.capture": _capture,
    "scope.timebase": _setting("scope.timebase", _timebase),
    "scope.average": _setting("scope.average", _set("averages", "count", int)),
    "pulser.rate": _setting("pulser.rate", _set("pulse_rate", "hz", float)),
    "counter.gate": _setting("counter.gate", _set("gate", "seconds", float)),
    "counter.count": lambda s, b, a: b.gate + 2 * s.message_s("counter"),
    "coincidence.gate": _setting("coincidence.gate", _set("coincidence_gate", "seconds", float)),
    "coincidence.count": lambda s, b, a: b.coincidence_gate + 2 * s.message_s("coincidence"),
    "counter.scan": lambda s, b, a: _scan_gates(a) * (b.gate + 3 * s.message_s("counter")),
    "switch.route": _relay,
    "switch.inject": _relay,
    "bias.ramp": _ramp,
    "bias.read": lambda s, b, a: 2 * s.message_s("bias"),
    "mca.acquire": lambda s, b, a: float(a.get("expected") or 0.0) + 6 * s.message_s("mca"),
    "temperature.read": lambda s, b, a: s.message_s("temperature"),
    "wait": lambda s, b, a: float(a["seconds"]),
    "prompt": lambda s, b, a: s.prompt_s,
}


def estimate_steps(
    steps: Sequence[PlannedStep], settings: EstimateSettings = EstimateSettings()
) -> list[float]:
    """Estimated seconds of each step, in order."""
    bench = _Bench()
    out: list[float] = []
    for step in steps:
        rule = _RULES.get(step.kind)
        if rule is not None:
            seconds = rule(settings, bench, dict(step.args))
        elif step.kind.startswith("analyse."):
            seconds = settings.analysis_s
        else:
            seconds = settings.message_s(step.kind.split(".", 1)[0])
        if step.kind.startswith("scope.") and step.kind != "scope.capture" and seconds > 0.0:
            bench.preamble_kept = False  # a scope setting sent: the next capture reads it again
        out.append(max(0.0, seconds))
    return out


def estimate_plan(plan: Plan, settings: EstimateSettings) -> Plan:
    """``plan`` with every step estimated under ``settings`` (e.g. a board file's timing)."""
    estimates = estimate_steps(plan.steps, settings)
    steps = tuple(
        dataclasses.replace(s, estimate_s=e) for s, e in zip(plan.steps, estimates, strict=True)
    )
    return dataclasses.replace(plan, steps=steps)
