"""A bias ramp as the driver commands it: where the output may be at each moment, and whether a
read-back ran ahead of that.

The same plan serves both kinds of supply.  A supply with a slew command ramps itself; the plan only
says where it may be by now.  A supply without one (declared ``set_ramp_rate: absent``) is ramped in
software: each :meth:`RampPlan.next_setpoint` is where the output should be by now, sent by the role
after reading back -- so a software ramp advances only while it is being read back, and stops where
it is when nobody watches.

A read-back beyond the commanded position by more than :func:`ahead_margin_V`, while the ramp
moves away from 0 V, means the supply is not doing what the log says (a supply that jumps to its
target, a slew rate ignored): the role raises :class:`RampRunaway` and the runner goes to the safe
state.  Moving towards 0 V faster than commanded is not refused (it is the safe direction).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Read-back margin before a ramp counts as running ahead: 0.5 V plus 2 % of the target (common
#: practice: a supply's read-back is good to a fraction of a per cent of range plus a few counts;
#: the margin covers that and the read-back noise, and still catches a jump of a few volts).
AHEAD_MARGIN_V = 0.5
AHEAD_MARGIN_REL = 0.02


def ahead_margin_V(target: float) -> float:
    return AHEAD_MARGIN_V + AHEAD_MARGIN_REL * abs(target)


@dataclass(frozen=True, kw_only=True)
class RampPlan:
    """From ``start`` to ``target`` at ``rate`` V/s, begun at ``t0`` (monotonic seconds)."""

    start: float
    target: float
    rate: float
    t0: float

    @property
    def away_from_zero(self) -> bool:
        return abs(self.target) > abs(self.start)

    def position(self, now: float) -> float:
        """Where the output may be by ``now``: ``start`` moved by ``rate`` per second, held at
        ``target``."""
        distance = self.target - self.start
        moved = min(abs(distance), self.rate * max(0.0, now - self.t0))
        return self.start + math.copysign(moved, distance)

    def ahead_by(self, measured: float, now: float) -> float:
        """How far ``measured`` is beyond the commanded position in the direction of travel (V);
        0 when the ramp moves towards 0 V."""
        if not self.away_from_zero:
            return 0.0
        sign = 1.0 if self.target > self.start else -1.0
        return max(0.0, sign * (measured - self.position(now)))

    def runs_ahead(self, measured: float, now: float) -> bool:
        return self.ahead_by(measured, now) > ahead_margin_V(self.target)

    def done(self, now: float) -> bool:
        return self.position(now) == self.target
