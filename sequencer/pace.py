"""Time left at the pace so far: what every progress line and bar of benchwright says.

``time_left`` = elapsed / done × (total − done): a plain extrapolation of the pace so far, not a
promise (steps and boards differ in length); every caller labels it as an estimate.
"""

from __future__ import annotations

import math


def time_left(done: float, total: float, elapsed_s: float) -> float | None:
    """Seconds left if the rest goes at the pace so far; None before anything is done."""
    if done <= 0 or total <= 0 or elapsed_s < 0 or not math.isfinite(elapsed_s):
        return None
    return max(0.0, total - done) * elapsed_s / done


def describe_left(seconds: float | None) -> str:
    """``about 3 min 10 s left``; "" when unknown."""
    if seconds is None:
        return ""
    if seconds < 1.0:
        return "less than 1 s left"
    whole = round(seconds)
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"about {hours} h {minutes:02d} min left"
    if minutes:
        return f"about {minutes} min {secs:02d} s left"
    return f"about {secs} s left"
