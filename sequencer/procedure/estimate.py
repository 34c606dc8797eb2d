"""Time estimates of planned steps, following the bench state through the plan.

* ``scope.capture``: ``averages`` acquisitions, each the longer of the record (points / sample rate) and
  the pulse period (1 / pulser rate), plus the transfer of every input (points x 2 bytes over the link
  plus a per-query overhead);
* ``counter.count``: the gate time; ``bias.ramp``: |V - previous setpoint| / rate plus a settling check;
* ``wait``: its time; ``prompt``: a typical operator reply; analysis: a few milliseconds;
* any other configuring step: one command and its error-queue check.

The figures are rough by design (common practice, no source): they make ``benchwright plan`` show
whether a procedure takes minutes or hours, not a schedule.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from .plan_model import PlannedStep

DEFAULT_COMMAND_S = 0.02
DEFAULT_QUERY_OVERHEAD_S = 0.005
DEFAULT_LINK_BYTES_PER_S = 10e6
DEFAULT_PROMPT_S = 10.0
DEFAULT_ANALYSIS_S = 0.005
DEFAULT_BIAS_SETTLE_S = 0.5


@dataclass(frozen=True, kw_only=True)
class EstimateSettings:
    """Assumptions of the estimate."""

    command_s: float = DEFAULT_COMMAND_S
    query_overhead_s: float = DEFAULT_QUERY_OVERHEAD_S
    link_bytes_per_s: float = DEFAULT_LINK_BYTES_PER_S
    bytes_per_sample: int = 2
    prompt_s: float = DEFAULT_PROMPT_S
    analysis_s: float = DEFAULT_ANALYSIS_S
    bias_settle_s: float = DEFAULT_BIAS_SETTLE_S


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


def _capture(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    record = b.points / b.sample_rate if b.sample_rate > 0 else 0.0
    period = 1.0 / b.pulse_rate if b.pulse_rate > 0 else 0.0
    acquire = max(b.averages, 1) * max(record, period)
    transfer = len(args.get("inputs", (1,))) * (
        s.query_overhead_s + b.points * s.bytes_per_sample / s.link_bytes_per_s
    )
    return acquire + transfer


def _ramp(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    volts, rate = float(args["volts"]), float(args.get("rate") or 0.0)
    took = abs(volts - b.bias_volts) / rate if rate > 0 else 0.0
    b.bias_volts = volts
    return took + s.bias_settle_s


def _track(name: str, attr: str) -> Callable[[EstimateSettings, _Bench, dict[str, Any]], float]:
    def apply(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
        setattr(b, attr, args[name])
        return s.command_s

    return apply


def _timebase(s: EstimateSettings, b: _Bench, args: dict[str, Any]) -> float:
    b.sample_rate, b.points = float(args["sample_rate"]), int(args["points"])
    return s.command_s * 3


_RULES: dict[str, Callable[[EstimateSettings, _Bench, dict[str, Any]], float]] = {
    "scope.capture": _capture,
    "scope.timebase": _timebase,
    "scope.average": _track("count", "averages"),
    "pulser.rate": _track("hz", "pulse_rate"),
    "counter.gate": _track("seconds", "gate"),
    "counter.count": lambda s, b, a: b.gate + s.command_s,
    "coincidence.gate": _track("seconds", "coincidence_gate"),
    "coincidence.count": lambda s, b, a: b.coincidence_gate + s.command_s,
    "bias.ramp": _ramp,
    "bias.read": lambda s, b, a: 2 * s.command_s,
    "mca.acquire": lambda s, b, a: float(a.get("expected") or 0.0) + 6 * s.command_s,
    "temperature.read": lambda s, b, a: s.command_s,
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
            seconds = settings.command_s
        out.append(max(0.0, seconds))
    return out
