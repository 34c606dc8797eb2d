"""Trends: one quantity of one board over its completed runs, with a control band.

Control band (Shewhart individuals chart, common practice): centre = mean of the reference points,
band = centre ± 3 s, s the sample standard deviation (ddof 1) of the first ``reference_runs``
points combined in quadrature with their RMS stated uncertainty (so repeats that agree exactly, as a
seeded simulator's do, still give a band as wide as the measurement's own precision); or a band given
by the caller.  A point outside the band is flagged.  *Drift warning*: the
latest point is outside the band although its verdict is still ``pass`` (it has moved but not yet
failed).  Needs at least 2 reference points for a computed band.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # numpy is imported where used: ``verify`` imports this package and needs none
    import numpy as np

from .quantities import UNITS
from .reading import StoreReader

DEFAULT_REFERENCE_RUNS = 5
BAND_SIGMAS = 3.0


@dataclass(frozen=True, kw_only=True)
class TrendPoint:
    run_id: int
    started_at: str
    value: float
    uncertainty: float | None
    low: float | None
    high: float | None
    verdict: str
    outside_band: bool


@dataclass(frozen=True, kw_only=True)
class TrendResult:
    board: str
    quantity: str
    unit: str
    channel: int | None
    output: str | None
    points: tuple[TrendPoint, ...]
    centre: float | None
    band_low: float | None
    band_high: float | None
    band_source: str  # "first N runs" or "given"
    drift: bool
    warning: str

    @property
    def flagged(self) -> tuple[TrendPoint, ...]:
        return tuple(p for p in self.points if p.outside_band)


def trend(
    store: StoreReader,
    board: str,
    quantity: str,
    *,
    channel: int | None = None,
    output: str | None = None,
    reference_runs: int = DEFAULT_REFERENCE_RUNS,
    band: tuple[float, float] | None = None,
    procedure: str | None = None,
) -> TrendResult:
    """The trend of ``quantity`` on ``board`` (module docstring).

    With ``channel`` / ``output`` None the series must still be a single one (a per-board quantity,
    or a board with one channel/output); otherwise ``ValueError`` names the choices.
    """
    if reference_runs < 2 and band is None:
        raise ValueError(f"reference_runs must be >= 2 to compute a band, got {reference_runs}")
    series = [
        p
        for p in store.quantity_series(board, quantity, channel=channel, output=output, procedure=procedure)
        if p.value is not None and math.isfinite(p.value)
    ]
    keys = sorted({(p.channel, p.output) for p in series}, key=lambda k: (k[0] or 0, k[1] or ""))
    if len(keys) > 1:
        choices = ", ".join(f"--channel {c} --output {o}" for c, o in keys[:6])
        raise ValueError(
            f"{quantity} of {board} has {len(keys)} series: choose one ({choices} ...)"
        )
    import numpy as np

    values = np.asarray([p.value for p in series], dtype=float)
    errors = np.asarray([p.uncertainty or 0.0 for p in series], dtype=float)
    centre, lo, hi, source = _band(values, errors, reference_runs, band)
    points = tuple(
        TrendPoint(
            run_id=p.run_id,
            started_at=p.started_at.isoformat(),
            value=float(p.value),
            uncertainty=p.uncertainty,
            low=p.low,
            high=p.high,
            verdict=p.verdict,
            outside_band=lo is not None and not (lo <= p.value <= hi),
        )
        for p in series
    )
    drift, warning = _drift(points, lo, hi, source, quantity)
    n_ref = min(len(points), reference_runs)
    if band is None and lo is not None and n_ref < reference_runs:
        thin = (f"the control band rests on {n_ref} run(s), fewer than the {reference_runs} asked "
                "for: it is uncertain itself")  # fmt: skip
        warning = f"{warning}; {thin}" if warning else thin
    ch, out = keys[0] if keys else (channel, output)
    return TrendResult(
        board=board,
        quantity=quantity,
        unit=UNITS.get(quantity, ""),
        channel=ch,
        output=out,
        points=points,
        centre=centre,
        band_low=lo,
        band_high=hi,
        band_source=source,
        drift=drift,
        warning=warning,
    )


def series_keys(
    store: StoreReader, board: str, quantity: str, *, output: str | None = None, procedure: str | None = None
) -> list[tuple[int | None, str | None]]:
    """The (channel, output) series of ``quantity`` on ``board``, by channel then output."""
    points = store.quantity_series(board, quantity, output=output, procedure=procedure)
    keys = {(p.channel, p.output) for p in points if p.value is not None}
    return sorted(keys, key=lambda k: (k[0] or 0, k[1] or ""))


def trends(
    store: StoreReader,
    board: str,
    quantity: str,
    *,
    output: str | None = None,
    reference_runs: int = DEFAULT_REFERENCE_RUNS,
    band: tuple[float, float] | None = None,
    procedure: str | None = None,
) -> list[TrendResult]:
    """One trend per channel (and output) of ``quantity`` on ``board``: all channels at once."""
    return [
        trend(store, board, quantity, channel=ch, output=out, reference_runs=reference_runs,
              band=band, procedure=procedure)
        for ch, out in series_keys(store, board, quantity, output=output, procedure=procedure)
    ]


def _band(
    values: np.ndarray, errors: np.ndarray, reference_runs: int, band: tuple[float, float] | None
) -> tuple[float | None, float | None, float | None, str]:
    if band is not None:
        lo, hi = sorted((float(band[0]), float(band[1])))
        return (lo + hi) / 2.0, lo, hi, "given"
    import numpy as np

    ref = values[:reference_runs]
    if ref.size < 2:
        return None, None, None, f"fewer than 2 runs (need {reference_runs} for the band)"
    stated = float(np.sqrt(np.mean(np.square(errors[:reference_runs]))))
    centre, s = float(ref.mean()), float(np.hypot(ref.std(ddof=1), stated))
    return centre, centre - BAND_SIGMAS * s, centre + BAND_SIGMAS * s, f"first {ref.size} runs"


def _drift(
    points: tuple[TrendPoint, ...], lo: float | None, hi: float | None, source: str, quantity: str
) -> tuple[bool, str]:
    if not points:
        return False, f"no completed run has {quantity}"
    if lo is None:
        return False, f"no control band: {source}"
    last = points[-1]
    if last.outside_band and last.verdict != "fail":
        return True, (
            f"drift: the latest {quantity} ({last.value:.6g}, run {last.run_id}) is outside the "
            f"control band [{lo:.6g}, {hi:.6g}] although within its limits"
        )
    if last.outside_band:
        return False, f"the latest {quantity} (run {last.run_id}) is outside the band and failed"
    return False, ""


CSV_COLUMNS = (
    "run_id",
    "started_at",
    "value",
    "uncertainty",
    "low",
    "high",
    "verdict",
    "outside_band",
    "band_low",
    "band_high",
)


def trend_csv(result: TrendResult) -> str:
    """The points as CSV (columns ``CSV_COLUMNS``; empty fields empty)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for p in result.points:
        w.writerow(
            [
                p.run_id,
                p.started_at,
                repr(p.value),
                _cell(p.uncertainty),
                _cell(p.low),
                _cell(p.high),
                p.verdict,
                "yes" if p.outside_band else "no",
                _cell(result.band_low),
                _cell(result.band_high),
            ]
        )
    return buf.getvalue()


def _cell(v: float | None) -> str:
    return "" if v is None else repr(float(v))


def plot_trend(result: TrendResult, path: Path | str) -> Path:
    """PNG of the trend: points (flagged ones as open squares), the band, the limits; the run ids
    on the axis (their dates below)."""
    from .plots import new_figure

    fig = new_figure(7.4, 3.2)
    ax = fig.add_axes((0.1, 0.24, 0.86, 0.64))
    _draw(ax, result, legend=True, dates=True)
    return _save(fig, path)


def plot_trends(results: list[TrendResult], path: Path | str, columns: int = 4) -> Path:
    """Small multiples: one panel per channel/output series, same layout as ``plot_trend``."""
    from .plots import new_figure

    if not results:
        raise ValueError("no series to plot")
    cols = min(columns, len(results))
    rows = math.ceil(len(results) / cols)
    fig = new_figure(2.6 * cols + 0.6, 2.1 * rows + 0.5)
    axes = fig.subplots(rows, cols, squeeze=False)
    for ax, result in zip(axes.flat, results, strict=False):
        _draw(ax, result, legend=False, dates=False)
    for ax in list(axes.flat)[len(results):]:
        ax.set_visible(False)
    first = results[0]
    fig.suptitle(f"{first.board}: {first.quantity} ({first.unit}) by channel; x: run id", fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 0.95))
    return _save(fig, path)


def _draw(ax: Any, result: TrendResult, *, legend: bool, dates: bool) -> None:
    import numpy as np

    x = np.arange(len(result.points))
    y = np.asarray([p.value for p in result.points], dtype=float)
    ok = np.asarray([not p.outside_band for p in result.points], dtype=bool)
    ax.plot(x, y, color="0.6", lw=0.8)
    ax.plot(x[ok], y[ok], "o", color="black", ms=5 if legend else 3, label="run")
    if (~ok).any():
        ax.plot(x[~ok], y[~ok], "s", mfc="none", mec="black", ms=9 if legend else 6, mew=1.5,
                label="outside band")  # fmt: skip
    if result.band_low is not None:
        ax.axhspan(result.band_low, result.band_high, color="0.9", hatch="..", ec="0.6",
                   label=f"control band ({result.band_source})")  # fmt: skip
        ax.axhline(result.centre, color="black", lw=0.8, ls=":")
    lows = {p.low for p in result.points if p.low is not None}
    highs = {p.high for p in result.points if p.high is not None}
    for v in sorted(lows | highs):
        ax.axhline(v, color="black", lw=1.2, ls="--")
    if lows or highs:
        ax.plot([], [], color="black", lw=1.2, ls="--", label="limits")
    labels = [
        f"{p.run_id}\n{p.started_at[:10]}" if dates else str(p.run_id) for p in result.points
    ]
    ax.set_xticks(x, labels, fontsize=6 if dates else 5, rotation=0 if dates else 90)
    where = "".join([
        f" ch {result.channel}" if result.channel else "",
        f" {result.output}" if result.output else "",
    ])  # fmt: skip
    title = f"{result.board}{where}: {result.quantity}" if legend else where.strip() or result.quantity
    ax.set_title(title + (" — DRIFT" if result.drift else ""), fontsize=9 if legend else 7)
    if legend:
        ax.set_ylabel(result.unit, fontsize=8)
        ax.set_xlabel("run id (date)", fontsize=7)
        ax.legend(fontsize=7, loc="best")
    ax.tick_params(axis="y", labelsize=7 if legend else 5)


def _save(fig: Any, path: Path | str) -> Path:
    out = Path(path)
    out.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(out, format="png", dpi=110)
    return out
