"""The curve points behind a run's figures: transfer curves and S-curves, one point a row.

``read_series`` is the one place exports and the web view get series from.  Today the store keeps
the traces and counts, and the certificate's evidence reader (``sequencer.reports.evidence``) turns
them into curves; when the engine stores the series it fitted, this function reads those instead
and nothing above it changes.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

from sequencer.reports.evidence import gather_evidence, snapshot_run


@dataclass(frozen=True, kw_only=True)
class CurvePoint:
    """One point of a series: ``series`` is ``transfer`` (x injected amplitude, y output height,
    both mV) or ``s_curve`` (x threshold mV, y counts out of ``trials``)."""

    step: str
    channel: int
    output: str | None
    series: str
    label: str
    x: float
    x_unit: str
    y: float
    y_unit: str
    trials: int | None = None

    def as_row(self) -> dict[str, Any]:
        return asdict(self)


def _step_of(snap: Any, channel: int, kinds: tuple[str, ...], output: str | None) -> str:
    for path in sorted(snap.steps):
        step = snap.steps[path]
        if step.kind not in kinds:
            continue
        for m in step.measurements:
            if m.channel == channel and (output is None or (m.output or "") == output):
                return path
    return ""


def read_series(store: Any, run_id: int) -> list[CurvePoint]:
    """Every transfer-curve and S-curve point of run ``run_id``, by channel, then curve."""
    snap = snapshot_run(store, run_id)
    points: list[CurvePoint] = []
    for channel in snap.channels:
        transfer, s_curves, _pulses = gather_evidence(snap, channel)
        for curve in transfer:
            step = _step_of(snap, channel, ("analyse.transfer",), curve.output)
            for x, y in zip(curve.amplitudes_mV, curve.heights_mV, strict=True):
                points.append(CurvePoint(
                    step=step, channel=channel, output=curve.output or None, series="transfer",
                    label=f"transfer {curve.output}".strip(), x=x, x_unit="mV", y=y, y_unit="mV",
                ))  # fmt: skip
        step = _step_of(snap, channel, ("analyse.s_curve", "analyse.discriminator"), None)
        for sc in s_curves:
            for x, n in zip(sc.thresholds_mV, sc.counts, strict=True):
                points.append(CurvePoint(
                    step=step, channel=channel, output=None, series="s_curve", label=sc.label,
                    x=x, x_unit="mV", y=float(n), y_unit="counts", trials=sc.trials,
                ))  # fmt: skip
    return points
