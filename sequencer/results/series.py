"""The curve points behind a run's figures: transfer curves and S-curves, one point a row.

``read_series`` is the one place exports and the web view get series from.  The engine keeps the
series each analysis step computed with the step (transfer points with their residuals from the
fitted line, S-curve points); the certificate's evidence reader (``sequencer.reports.evidence``)
reads them, and so does this.  Runs recorded before the engine kept its series have none.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

from sequencer.reports.evidence import gather_evidence, snapshot_run


@dataclass(frozen=True, kw_only=True)
class CurvePoint:
    """One point of a series: ``series`` is ``transfer`` (x injected amplitude, y output height,
    both mV), ``s_curve`` (x threshold mV, y counts out of ``trials``) or ``pulse`` (the mean
    pulse a timing was taken from: x time ns, y mV)."""

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
    residual: float | None = None  # transfer: height minus the fitted line, mV

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
    """Every transfer-curve, S-curve and mean-pulse point of run ``run_id``, by channel, then curve."""
    snap = snapshot_run(store, run_id)
    points: list[CurvePoint] = []
    for channel in snap.channels:
        transfer, s_curves, pulses = gather_evidence(snap, channel)
        for curve in transfer:
            step = _step_of(snap, channel, ("analyse.transfer",), curve.output)
            residuals = list(curve.residuals_mV) or [None] * len(curve.amplitudes_mV)
            for x, y, r in zip(curve.amplitudes_mV, curve.heights_mV, residuals, strict=True):
                points.append(CurvePoint(
                    step=step, channel=channel, output=curve.output or None, series="transfer",
                    label=f"transfer {curve.output}".strip(), x=x, x_unit="mV", y=y, y_unit="mV",
                    residual=r,
                ))  # fmt: skip
        step = _step_of(snap, channel, ("analyse.s_curve", "analyse.discriminator"), None)
        for sc in s_curves:
            for x, n in zip(sc.thresholds_mV, sc.counts, strict=True):
                points.append(CurvePoint(
                    step=step, channel=channel, output=None, series="s_curve", label=sc.label,
                    x=x, x_unit="mV", y=float(n), y_unit="counts", trials=sc.trials,
                ))  # fmt: skip
        for pulse in pulses:
            step = _step_of(snap, channel, ("analyse.peaking", "analyse.rise"), pulse.output)
            for i, y in enumerate(pulse.samples_mV):
                points.append(CurvePoint(
                    step=step, channel=channel, output=pulse.output or None, series="pulse",
                    label=f"mean pulse {pulse.output} ({pulse.quantity})".replace("  ", " "),
                    x=pulse.t0_ns + i * pulse.dt_ns, x_unit="ns", y=y, y_unit="mV",
                ))  # fmt: skip
    return points
