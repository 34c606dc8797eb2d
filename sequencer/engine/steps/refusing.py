"""What the analysis steps refuse to measure, and why: polarity, rails and the reasons per capture.

A capture with samples at its input's rails, an output without a pulse above the noise, a pulse of
the wrong polarity or a flat top is not measured: the step's quantities are NaN with verdict fail
and the reason is stored with the step (``results["error"]``), so it reaches the certificate.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence

import numpy as np

from drivers.trace import META_NOT_STORED, Trace
from sequencer.analysis import refusals

from ..context import RunContext
from .scope import rails_of


class AnalysisRefused(ValueError):
    """An analysis step that cannot measure its inputs; the message is the reason."""


def polarity(ctx: RunContext, output: str | None) -> int:
    """+1 or -1: how pulses on ``output`` swing, as the run's board type declares it."""
    return ctx.plan.board.sign(output)


def clip_reasons(items: Sequence[Trace], rows: np.ndarray) -> list[str]:
    """Per captured row: ``clipped: N % of samples at the rail`` or "".  Rails never known (no
    ``scope.set_input`` before the capture): "".  Rails lost (a trace replayed from rows stored
    before the store kept a trace's meta): refused, ``rails unknown: ...`` -- it cannot be checked."""
    out = []
    for item, row in zip(items, rows, strict=True):
        rails = rails_of(item)
        if rails is None:
            lost = item.meta.get(META_NOT_STORED) if item.meta else None
            out.append(f"rails unknown, cannot check for clipping: {lost}" if lost else "")
        else:
            out.append(refusals.clipping_reasons(row[None, :], rails)[0])
    return out


def merge(*per_row: Sequence[str]) -> list[str]:
    """Per row, the first non-empty reason of the lists given."""
    return [next((r for r in reasons if r), "") for reasons in zip(*per_row, strict=True)]


def refuse_any(reasons: Sequence[str], what: str = "") -> None:
    """Raise :class:`AnalysisRefused` with the commonest reason when any row was refused."""
    found = Counter(r for r in reasons if r).most_common(1)
    if found:
        count = sum(1 for r in reasons if r)
        share = f" ({count} of {len(reasons)} captures)" if len(reasons) > 1 else ""
        raise AnalysisRefused(f"{what}{found[0][0]}{share}")
