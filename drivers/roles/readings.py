"""Checks on the numbers an instrument reports, before anything decides on them.

A safety decision (is the ramp done, is the current above the limit, is the output at 0 V) must never
rest on a reading that cannot be true.  SCPI-1999 Volume 1, 7.2.1.5 (from memory) reserves
``9.91E+37`` for not-a-number and ``+/-9.9E+37`` for infinity; instruments send them for an overrange
or an unsettled meter as well.  A reading is refused when it is NaN, infinite, one of those codes (or
larger), or beyond a plausible bound -- for a voltage the bench file's ``max_volts`` plus a margin.
"""

from __future__ import annotations

import math

from drivers.errors import ImplausibleReading

#: SCPI's not-a-number and infinity codes (SCPI-1999 Vol. 1 7.2.1.5, from memory); anything at or
#: above the smaller of the two is a code, never a measurement.
SCPI_NAN = 9.91e37
SCPI_INFINITY = 9.9e37

#: A voltage reading counts as implausible beyond ``max_volts * (1 + REL) + ABS`` (common practice:
#: a supply's read-back is good to a few per cent of range; 10 % + 1 V leaves room for meter noise and
#: an overshoot, and still catches a supply reading far above what it may deliver).
PLAUSIBLE_VOLTS_REL = 0.10
PLAUSIBLE_VOLTS_ABS = 1.0


def plausible_volts(max_volts: float) -> float:
    """The largest voltage magnitude a supply limited to ``max_volts`` may plausibly read."""
    return abs(float(max_volts)) * (1.0 + PLAUSIBLE_VOLTS_REL) + PLAUSIBLE_VOLTS_ABS


def check_reading(
    what: str,
    value: float,
    *,
    bound: float | None = None,
    unit: str = "",
    address: str = "",
    command: str = "",
) -> float:
    """``value`` as a float when it can be a true reading, else :class:`ImplausibleReading`.

    ``bound``: the largest plausible magnitude (None: only NaN, infinity and the SCPI codes are
    refused).
    """
    number = float(value)
    suffix = f" {unit}" if unit else ""
    if math.isnan(number):
        reason = "is not a number (NaN)"
    elif math.isinf(number):
        reason = "is infinite"
    elif abs(number) >= SCPI_INFINITY:
        reason = f"is SCPI's not-a-number/overrange code ({number:.4g}{suffix})"
    elif bound is not None and abs(number) > bound:
        reason = f"{number:.6g}{suffix} is beyond the plausible {bound:.6g}{suffix}"
    else:
        return number
    raise ImplausibleReading(
        f"{what} reading {reason}; refusing to decide on it", address=address, command=command
    )
