"""The batch summary: yield, per-quantity statistics, robust outliers, failed channels.

Which runs: for each board of the batch, its latest completed run (its latest run of any status if
none completed).  A channel *passes* when its run completed and none of its values - nor the
board's own values (``channel`` empty, e.g. ``leakage_nA``) - failed; yield = passing channels /
channels.  A run whose values all belong to the module as a whole (a coincidence unit) counts as
one "channel", the module (``MODULE_CHANNEL``, printed ``module``).

Outliers (robust, also inside the limits): a value is an outlier when
``|x - median| > outlier_sigma · 1.4826 · MAD`` over the batch's values of that quantity and output
(and board type, when the batch holds boards of more than one type: an inverted type's negative gains
are a population of their own, not outliers of the other's),
MAD the median absolute deviation (1.4826 = 1/Φ⁻¹(3/4) makes it estimate σ of a normal distribution;
P. J. Huber, *Robust Statistics*, 1981, from memory).  ``DEFAULT_OUTLIER_SIGMA`` 3.5 is the cut of
B. Iglewicz and D. C. Hoaglin, *How to Detect and Handle Outliers*, ASQC 1993 (from memory).

Crosstalk values fall into two populations that must not share one median: into the *adjacent*
channels of the aggressor (|victim - aggressor| = 1, the coupling being measured) and into a
*distant* control channel (the floor, about zero).  Each is a group of its own.
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sequencer.quantities import MODULE_CHANNEL, judged_channels

from .quantities import format_limits, format_number, quantity_rank
from .reading import StoreReader

DEFAULT_OUTLIER_SIGMA = 3.5
MAD_TO_SIGMA = 1.4826


@dataclass(frozen=True, kw_only=True)
class QuantityStats:
    quantity: str
    output: str | None
    group: str  # "" or, for crosstalk, "adjacent" / "distant" (module docstring)
    unit: str
    n: int
    #: The board type of this population when the batch holds more than one type ("" otherwise):
    #: boards of different types (an inverted board's negative gain) are never pooled.
    board_type: str = ""
    median: float
    robust_sigma: float  # 1.4826 · MAD
    mean: float
    std: float  # sample standard deviation (ddof 1; 0 for one value)
    minimum: float
    maximum: float
    low: float | None
    high: float | None
    n_fail: int
    values: tuple[float, ...]


@dataclass(frozen=True, kw_only=True)
class Outlier:
    board: str
    channel: int | None
    output: str | None
    aggressor: int | None
    quantity: str
    group: str  # as QuantityStats.group
    value: float
    robust_z: float  # (value - median) / robust sigma
    verdict: str


@dataclass(frozen=True, kw_only=True)
class FailedChannel:
    board: str
    run_id: int
    channel: int
    reasons: tuple[str, ...]  # failed quantities ("gain x5 = 6.5 V/V") or "run aborted"


@dataclass(frozen=True, kw_only=True)
class BatchSummary:
    batch: str
    outlier_sigma: float
    runs: tuple[tuple[str, int, str], ...]  # (board, run id, status)
    channels: int
    passed: int
    stats: tuple[QuantityStats, ...]
    outliers: tuple[Outlier, ...]
    failed: tuple[FailedChannel, ...]

    @property
    def yield_fraction(self) -> float:
        return self.passed / self.channels if self.channels else 0.0

    def to_text(self) -> str:
        return format_summary(self)


def batch_summary(
    store: StoreReader, batch: str, *, outlier_sigma: float = DEFAULT_OUTLIER_SIGMA
) -> BatchSummary:
    """Summarise batch ``batch`` from the store (module docstring for the definitions)."""
    if not outlier_sigma > 0:
        raise ValueError(f"outlier_sigma must be > 0, got {outlier_sigma}")
    runs = _latest_runs(store.runs_of_batch(batch))
    mixed = len({r.board_type for r in runs}) > 1
    groups: dict[tuple[str, str | None, str, str], list[tuple[str, Any]]] = defaultdict(list)
    failed: list[FailedChannel] = []
    channels = passed = 0
    for run in runs:
        ms = store.measurements(run_id=run.id)
        for m in ms:
            if math.isfinite(m.value):  # NaN: not measured (sequencer.records)
                kind = run.board_type if mixed else ""
                groups[(m.quantity, m.output, value_group(m), kind)].append((run.board, m))
        board_fails = [_reason(m) for m in ms if m.channel is None and m.verdict == "fail"]
        for ch in judged_channels(m.channel for m in ms):  # a module as a whole: once
            channels += 1
            reasons = board_fails + [
                _reason(m) for m in ms if m.channel == ch and m.verdict == "fail"
            ]
            if run.status != "completed":
                reasons.append(f"run {run.status}")
            if reasons:
                failed.append(
                    FailedChannel(
                        board=run.board, run_id=run.id, channel=ch, reasons=tuple(reasons)
                    )
                )
            else:
                passed += 1
    stats, outliers = [], []
    for key in sorted(groups, key=lambda k: (quantity_rank(k[0]), k[0], k[1] or "", k[2], k[3])):
        s, out = _stats(key, groups[key], outlier_sigma)
        stats.append(s)
        outliers += out
    return BatchSummary(
        batch=batch,
        outlier_sigma=outlier_sigma,
        runs=tuple((r.board, r.id, r.status) for r in runs),
        channels=channels,
        passed=passed,
        stats=tuple(stats),
        outliers=tuple(outliers),
        failed=tuple(failed),
    )


def value_group(m: Any) -> str:
    """The population a value belongs to within its quantity and output (module docstring)."""
    if m.aggressor is None or m.channel is None:
        return ""
    return "adjacent" if abs(m.channel - m.aggressor) == 1 else "distant"


def label(q: QuantityStats) -> str:
    """``crosstalk_pct (adjacent)``; the plain name for a quantity of one population; in a batch of
    several board types, the type too (``gain [PA8N]``)."""
    return q.quantity + (f" ({q.group})" if q.group else "") + (f" [{q.board_type}]" if q.board_type else "")


def _latest_runs(runs: list[Any]) -> list[Any]:
    chosen: dict[str, Any] = {}
    for r in runs:  # oldest first
        best = chosen.get(r.board)
        if best is None or r.status == "completed" or best.status != "completed":
            chosen[r.board] = r
    return sorted(chosen.values(), key=lambda r: r.board)


def _reason(m: Any) -> str:
    where = f" {m.output}" if m.output else ""
    src = f" from ch {m.aggressor}" if m.aggressor is not None else ""
    return f"{m.quantity}{where}{src} = {format_number(m.value)} {m.unit}"


def _stats(
    key: tuple[str, str | None, str, str], rows: list[tuple[str, Any]], k: float
) -> tuple[QuantityStats, list[Outlier]]:
    import numpy as np  # here, not at the top: ``verify`` imports this package and needs no numpy

    quantity, output, group, board_type = key
    x = np.asarray([m.value for _, m in rows], dtype=float)
    median = float(np.median(x))
    robust = MAD_TO_SIGMA * float(np.median(np.abs(x - median)))
    lows = [m.low for _, m in rows if m.low is not None]
    highs = [m.high for _, m in rows if m.high is not None]
    stats = QuantityStats(
        quantity=quantity,
        output=output,
        group=group,
        unit=rows[0][1].unit,
        n=int(x.size),
        board_type=board_type,
        median=median,
        robust_sigma=robust,
        mean=float(x.mean()),
        std=float(x.std(ddof=1)) if x.size > 1 else 0.0,
        minimum=float(x.min()),
        maximum=float(x.max()),
        low=max(set(lows), key=lows.count) if lows else None,
        high=max(set(highs), key=highs.count) if highs else None,
        n_fail=sum(1 for _, m in rows if m.verdict == "fail"),
        values=tuple(float(v) for v in x),
    )
    outliers = []
    if robust > 0:
        for board, m in rows:
            z = (m.value - median) / robust
            if abs(z) > k:
                outliers.append(
                    Outlier(
                        board=board,
                        channel=m.channel,
                        output=m.output,
                        aggressor=m.aggressor,
                        quantity=quantity,
                        group=group,
                        value=float(m.value),
                        robust_z=z,
                        verdict=m.verdict,
                    )
                )
    return stats, outliers


# -- renderings -----------------------------------------------------------------------------------

STATS_HEADER = ("quantity", "output", "n", "median", "1.4826·MAD", "min", "max", "limits", "fails")
OUTLIER_HEADER = ("board", "channel", "quantity", "output", "value", "robust z", "verdict")
FAILED_HEADER = ("board", "run", "channel", "why")


def stats_rows(s: BatchSummary) -> list[tuple[str, ...]]:
    return [
        (
            label(q),
            q.output or "—",
            str(q.n),
            format_number(q.median),
            format_number(q.robust_sigma),
            format_number(q.minimum),
            format_number(q.maximum),
            format_limits(q.low, q.high),
            str(q.n_fail),
        )
        for q in s.stats
    ]


def outlier_rows(s: BatchSummary) -> list[tuple[str, ...]]:
    return [
        (
            o.board,
            "—" if o.channel is None else str(o.channel),
            o.quantity
            + (f" ({o.group}, from ch {o.aggressor})" if o.aggressor is not None else ""),
            o.output or "—",
            format_number(o.value),
            f"{o.robust_z:+.1f}",
            o.verdict,
        )
        for o in s.outliers
    ]


def failed_rows(s: BatchSummary) -> list[tuple[str, ...]]:
    """One row per failing value; board, run and channel only on a channel's first row."""
    rows: list[tuple[str, ...]] = []
    for f in s.failed:
        for i, reason in enumerate(f.reasons or ("",)):
            channel = "module" if f.channel == MODULE_CHANNEL else str(f.channel)
            who = (f.board, str(f.run_id), channel) if i == 0 else ("", "", "")
            rows.append((*who, reason))
    return rows


def headline(s: BatchSummary) -> str:
    return (
        f"batch {s.batch}: {len(s.runs)} boards, {s.channels} channels, {s.passed} passed, "
        f"yield {100.0 * s.yield_fraction:.1f} %"
    )


def format_summary(s: BatchSummary) -> str:
    """The summary as plain text for the terminal."""
    lines = [headline(s), ""]
    for title, header, rows in (
        ("Quantities", STATS_HEADER, stats_rows(s)),
        (
            f"Outliers (> {s.outlier_sigma:g} robust σ from the batch median)",
            OUTLIER_HEADER,
            outlier_rows(s),
        ),
        ("Failed channels", FAILED_HEADER, failed_rows(s)),
    ):
        lines.append(title)
        lines += _text_table(header, rows) if rows else ["  none"]
        lines.append("")
    return "\n".join(lines).rstrip() + "\n"


def _text_table(header: tuple[str, ...], rows: list[tuple[str, ...]]) -> list[str]:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    fmt = "  ".join(f"{{:<{w}}}" for w in widths)
    lines = [fmt.format(*header), fmt.format(*("-" * w for w in widths))]
    lines += [fmt.format(*r) for r in rows]
    return ["  " + line.rstrip() for line in lines]


def batch_report(
    store: StoreReader,
    batch: str,
    out_dir: Path | str,
    *,
    outlier_sigma: float = DEFAULT_OUTLIER_SIGMA,
    paper: str = "A4",
) -> list[Path]:
    """Write ``batch-<batch>.pdf`` and ``.html`` (summary, histograms with limits) into ``out_dir``."""
    from .batch_render import render_batch

    summary = batch_summary(store, batch, outlier_sigma=outlier_sigma)
    return render_batch(summary, Path(out_dir), paper=paper)
