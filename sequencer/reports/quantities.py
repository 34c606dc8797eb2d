"""Display facts of the DESIGN.md quantities and how numbers are printed on reports.

Number formatting (common practice, cf. the Particle Data Group rounding rule, from memory): an
uncertainty is printed with two significant digits and its value to the same decimal place; a value
without uncertainty with ``VALUE_DIGITS`` significant digits.  The printed text is a pure function of
the stored numbers, so ``verify`` can recompute it.
"""

from __future__ import annotations

import math

from sequencer.quantities import QUANTITY_UNITS as UNITS

VALUE_DIGITS = 5
UNCERTAINTY_DIGITS = 2


READABLE: dict[str, str] = {
    "gain": "Gain",
    "offset_mV": "Offset",
    "inl_pct": "Integral nonlinearity",
    "noise_in_mV": "Noise, input-referred",
    "crosstalk_pct": "Crosstalk",
    "threshold_mV": "Threshold (50 % point)",
    "threshold_sigma_mV": "Threshold width (sigma)",
    "discriminator_offset_mV": "Discriminator offset",
    "peaking_time_ns": "Peaking time",
    "rise_time_ns": "Rise time (10-90 %)",
    "leakage_nA": "Leakage current",
    "baseline_mV": "Baseline",
    "zero_crossing_ns": "Zero crossing (from onset)",
    "zero_crossing_walk_ns": "Zero-crossing walk",
    "bandwidth_mhz": "Bandwidth (-3 dB)",
    "disc_walk_ns": "Discriminator output walk",
    "disc_jitter_ns": "Discriminator output jitter",
    "coincidence_width_ns": "Coincidence output width",
}
"""Names printed on certificates (the unit is its own column, so it is not repeated in the name);
a quantity not listed is printed by its DESIGN.md name."""


def readable(quantity: str) -> str:
    return READABLE.get(quantity, quantity)


ORDER: tuple[str, ...] = tuple(UNITS)
"""The order in which quantities are listed on a certificate (DESIGN.md table order)."""


def quantity_rank(quantity: str) -> int:
    """Sort key: DESIGN.md order first, unknown quantities after, alphabetically by the caller."""
    return ORDER.index(quantity) if quantity in ORDER else len(ORDER)


def format_number(value: float | None, digits: int = VALUE_DIGITS) -> str:
    """``value`` with ``digits`` significant digits, no exponent for |v| in [1e-4, 1e6); "—" if None."""
    if value is None:
        return "—"
    if not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("+inf" if value > 0 else "-inf")
    if value == 0.0:
        return "0"
    magnitude = abs(value)
    if not 1e-4 <= magnitude < 1e6:
        return f"{value:.{digits - 1}e}"
    decimals = max(0, digits - 1 - math.floor(math.log10(magnitude)))
    return f"{value:.{decimals}f}"


def format_measured(value: float | None, uncertainty: float | None) -> tuple[str, str]:
    """(value text, uncertainty text): the value rounded to the uncertainty's second digit."""
    if value is None or uncertainty is None or not math.isfinite(uncertainty) or uncertainty <= 0:
        return format_number(value), format_number(uncertainty) if uncertainty is not None else ""
    if not math.isfinite(value):
        return format_number(value), format_number(uncertainty, UNCERTAINTY_DIGITS)
    exponent = math.floor(math.log10(uncertainty)) - (UNCERTAINTY_DIGITS - 1)
    decimals = max(0, -exponent)
    if decimals > 12 or abs(value) >= 1e6:
        return format_number(value), format_number(uncertainty, UNCERTAINTY_DIGITS)
    return f"{value:.{decimals}f}", f"{uncertainty:.{decimals}f}"


def format_limits(low: float | None, high: float | None) -> str:
    """The acceptance window as text: ``a … b``, ``≥ a``, ``≤ b`` or ``—``."""
    if low is None and high is None:
        return "—"
    if low is None:
        return f"≤ {format_limit(high)}"
    if high is None:
        return f"≥ {format_limit(low)}"
    return f"{format_limit(low)} … {format_limit(high)}"


def format_limit(value: float | None) -> str:
    """A limit as set (shortest form, up to 6 significant digits): 0.9, 1.1, 250, 1e-05."""
    return "—" if value is None else f"{value:.6g}"
