"""The records engine, store and reports share, one type per concept.

A leaf module (standard library only): ``sequencer.engine``, ``sequencer.store`` (its light read path
included) and ``sequencer.reports`` import it without importing each other, numpy or SQLAlchemy.
A trace is ``drivers.trace.Trace``; a measurement is ``Measurement`` below.

A missing value has one spelling everywhere: ``value`` is NaN and ``reason`` says why (what the
analysis refused). ``Measurement.measured`` is the test for it. The database keeps a missing value as
SQL NULL; the store maps NaN -> NULL when it writes a row and NULL -> NaN when it reads one, and
nowhere else.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

Verdict = Literal["pass", "fail", "info"]


@dataclass(frozen=True)
class Measurement:
    """One judged value. ``channel`` is 1-based or None (per board); verdict pass/fail/info.

    ``run_id`` and ``path`` say where a stored measurement belongs (the store fills them in; a
    measurement the engine just made carries them on its ``MeasurementMade`` event instead).
    """

    quantity: str
    value: float          # NaN = not measured; ``reason`` says why
    unit: str
    uncertainty: float | None = None
    channel: int | None = None
    output: str | None = None
    aggressor: int | None = None
    low: float | None = None
    high: float | None = None
    verdict: Verdict = "info"
    qualifier: str = ""   # "" or "within uncertainty": value ± U straddles a limit (decision rule)
    reason: str = ""      # why ``value`` is NaN: what the analysis refused (empty for a value)
    run_id: int | None = None
    path: str = ""

    @property
    def measured(self) -> bool:
        """True when ``value`` is a number (not NaN: the analysis gave none)."""
        return not math.isnan(self.value)


__all__ = ["Measurement", "Verdict"]
