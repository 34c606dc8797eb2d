"""How long a real bench takes: the timing model shared by the simulator and ``benchwright plan``.

A leaf module (no project imports): the simulator paces its instruments by it (accounted on a
:class:`drivers.sim.clock.SimClock`, waited for real with ``--realtime``) and the plan's estimate
(:mod:`sequencer.procedure.estimate`) sums the same formulas, so the two cannot drift apart.

Each instrument of a bench has an :class:`InstrumentTiming`; a simulated board file states them
per role under ``timing:`` (keys below, each optional), anything unstated takes the default:

===================  =========  ===========================================================
key                  default    meaning
===================  =========  ===========================================================
``round_trip_ms``    1.0        one program message and its reply over the link, instrument
                                parsing included (common practice for SCPI over a lab LAN)
``transfer_MBps``    10.0       block payload rate (100 Mbit/s Ethernet; common practice)
``relay_settle_ms``  2.0        a switch closing a route is busy this long (reed relays settle
                                in 0.5-3 ms; common practice)
``rearm_us``         0.0        scope dead time per acquisition on top of the trigger period
===================  =========  ===========================================================

The physics needs no key: an acquisition of ``averages`` triggers at the pulser's rate takes
``averages x max(record, 1 / rate)`` (a trigger comes once per pulse period), a counter gate
takes its gate time, a bias supply ramps ``|dV| / slew``.  These are the *waits the measurement
statistics demand* (the floor no software can beat); round trips and transfers are overhead.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

DEFAULT_ROUND_TRIP_S = 1e-3
DEFAULT_TRANSFER_BPS = 10e6
DEFAULT_RELAY_SETTLE_S = 2e-3
DEFAULT_REARM_S = 0.0

#: Kinds of time the clock keeps apart: what the statistics demand, and what the link costs.
DEMANDED = ("acquisition", "gate", "settle", "ramp")
OVERHEAD = ("round_trip", "transfer")

#: Board-file keys -> (attribute, factor to SI).
KEYS: Mapping[str, tuple[str, float]] = {
    "round_trip_ms": ("round_trip_s", 1e-3),
    "transfer_MBps": ("transfer_Bps", 1e6),
    "relay_settle_ms": ("relay_settle_s", 1e-3),
    "rearm_us": ("rearm_s", 1e-6),
}


@dataclass(frozen=True, kw_only=True)
class InstrumentTiming:
    """The pace of one instrument (SI units)."""

    round_trip_s: float = DEFAULT_ROUND_TRIP_S
    transfer_Bps: float = DEFAULT_TRANSFER_BPS
    relay_settle_s: float = DEFAULT_RELAY_SETTLE_S
    rearm_s: float = DEFAULT_REARM_S


@dataclass(frozen=True, kw_only=True)
class BenchTiming:
    """Per-role timing; a role not listed has the defaults."""

    roles: Mapping[str, InstrumentTiming] = field(default_factory=dict)

    def of(self, role: str) -> InstrumentTiming:
        return self.roles.get(role, InstrumentTiming())


DEFAULT_TIMING = BenchTiming()


def acquisition_s(
    *, averages: int, points: int, sample_rate_hz: float, trigger_rate_hz: float,
    rearm_s: float = DEFAULT_REARM_S,
) -> float:  # fmt: skip
    """Seconds to acquire ``averages`` triggered records: each waits for the next trigger (one per
    pulse period ``1 / trigger_rate_hz``) and lasts at least the record ``points / sample_rate_hz``."""
    record = points / sample_rate_hz if sample_rate_hz > 0 else 0.0
    period = 1.0 / trigger_rate_hz if trigger_rate_hz > 0 else 0.0
    return max(int(averages), 1) * (max(record, period) + rearm_s)


def transfer_s(nbytes: int, timing: InstrumentTiming) -> float:
    """Seconds to move ``nbytes`` of block payload over the link (the round trip not included)."""
    return nbytes / timing.transfer_Bps if timing.transfer_Bps > 0 else 0.0


def ramp_s(from_volts: float, to_volts: float, slew_V_per_s: float) -> float:
    """Seconds a supply takes to slew between two set points."""
    return abs(to_volts - from_volts) / slew_V_per_s if slew_V_per_s > 0 else 0.0


def read_timing(raw: Any) -> tuple[InstrumentTiming, list[tuple[str | None, str]]]:
    """An instrument's ``timing:`` mapping (the :data:`KEYS`, each a number from 0 in the key's
    unit) as SI values, and its problems as ``(key or None, message)`` for the caller to locate."""
    if not isinstance(raw, Mapping):
        return InstrumentTiming(), [(None, "timing must be a mapping of " + ", ".join(KEYS))]
    problems: list[tuple[str | None, str]] = []
    values: dict[str, float] = {}
    for key, value in raw.items():
        if key not in KEYS:
            problems.append((key, f"unknown timing key {key!r} (known: {', '.join(KEYS)})"))
            continue
        if isinstance(value, bool) or not isinstance(value, int | float) or not 0 <= value < 1e6:
            problems.append((key, f"timing.{key} must be a number from 0"))
            continue
        attr, factor = KEYS[key]
        values[attr] = float(value) * factor
    return InstrumentTiming(**values), problems
