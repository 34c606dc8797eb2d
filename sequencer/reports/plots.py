"""The figures of certificates and batch reports, as PNG bytes.

Plotting is the cost of a certificate, so a :class:`Plotter` builds each kind of figure once (Agg
canvas, fixed margins, no automatic layout) and later calls only replace the data of its lines and
texts.  One Plotter serves one process (the certificate workers each make their own); nothing here is
global.  Series are told apart by marker and line style as well as by colour, for black-and-white
prints.  The font is DejaVu Sans, which ships with matplotlib.
"""

from __future__ import annotations

import io
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from .certificate_data import QuantityLine
from .evidence import PulseShape, SCurve, TransferCurve

DPI = 100
MARKERS = ("o", "s", "^", "v", "D", "x")
LINESTYLES = ("-", "--", ":", "-.", (0, (5, 1, 1, 1)), (0, (1, 2)))
COLOURS = ("#000000", "#1f4e9e", "#b03a2e", "#2e7d32", "#6a1b9a", "#8d6e00")
MAX_OUTPUTS = 3
MAX_SERIES = len(MARKERS)


def new_figure(width_in: float, height_in: float) -> Any:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=DPI, layout=None)
    FigureCanvasAgg(fig)
    return fig


def _fixed_title(ax: Any) -> Any:
    """Pin the title's position: matplotlib then skips measuring the tick labels on every draw."""
    ax.set_title("", y=1.0, pad=3)
    ax.xaxis.get_major_locator().set_params(nbins=4)
    ax.yaxis.get_major_locator().set_params(nbins=4)
    return ax


def _png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, pil_kwargs={"compress_level": 1})
    return buf.getvalue()


def _rescale(ax: Any) -> None:
    ax.relim(visible_only=True)
    ax.autoscale_view()


class Plotter:
    """Reusable figures; every method returns PNG bytes, or None when there is nothing to draw."""

    def __init__(self) -> None:
        self._figures: dict[str, tuple[Any, Any]] = {}

    def _get(self, kind: str) -> tuple[Any, Any]:
        if kind not in self._figures:
            self._figures[kind] = _BUILDERS[kind]()
        return self._figures[kind]

    def transfer(self, curves: Sequence[TransferCurve]) -> bytes | None:
        """Transfer curve with its fitted line (top) and residuals in % of span (INL, bottom)."""
        curves = [c for c in curves if len(c.amplitudes_mV) >= 2][:MAX_OUTPUTS]
        if not curves:
            return None
        fig, cols = self._get("transfer")
        for i, (top, bottom, art) in enumerate(cols):
            used = i < len(curves)
            top.set_visible(used)
            bottom.set_visible(used)
            if used:
                _draw_transfer(top, bottom, art, curves[i])
        return _png(fig)

    def s_curves(self, curves: Sequence[SCurve]) -> bytes | None:
        """Efficiency vs threshold, points and the stored fit (erfc with μ, σ)."""
        curves = [c for c in curves if c.thresholds_mV][:MAX_SERIES]
        if not curves:
            return None
        fig, (ax, series) = self._get("s_curve")
        for i, (pts, fit) in enumerate(series):
            pts.set_visible(i < len(curves))
            fit.set_visible(False)
            if i < len(curves):
                _draw_s_curve(pts, fit, curves[i])
        ax.legend(
            handles=[p for p in series_handles(series) if p.get_visible()],
            fontsize=7,
            loc="upper right",
            frameon=True,
        )
        _rescale(ax)
        ax.set_ylim(-0.05, 1.08)
        return _png(fig)

    def pulses(self, shapes: Sequence[PulseShape]) -> bytes | None:
        """Captured (averaged) pulse of each output with the peak and the stored time marked."""
        shapes = [s for s in shapes if s.samples_mV][:MAX_OUTPUTS]
        if not shapes:
            return None
        fig, cols = self._get("pulse")
        for i, (ax, art) in enumerate(cols):
            ax.set_visible(i < len(shapes))
            if i < len(shapes):
                _draw_pulse(ax, art, shapes[i])
        return _png(fig)

    def crosstalk(self, rows: Sequence[QuantityLine], aggressor: int) -> bytes | None:
        """Crosstalk into each victim channel when ``aggressor`` is driven, one marker per output."""
        rows = [r for r in rows if r.quantity == "crosstalk_pct" and r.value is not None]
        if not rows:
            return None
        fig, (ax, series, limit, zero) = self._get("crosstalk")
        outputs = sorted({r.output or "" for r in rows})[:MAX_SERIES]
        for i, line in enumerate(series):
            mine = [r for r in rows if (r.output or "") == outputs[i]] if i < len(outputs) else []
            line.set_visible(bool(mine))
            line.set_data([r.channel for r in mine], [r.value for r in mine])
            line.set_label(outputs[i] or "—" if i < len(outputs) else "")
        highs = [r.high for r in rows if r.high is not None]
        limit.set_visible(bool(highs))
        limit.set_ydata([max(highs)] * 2 if highs else [0, 0])
        ax.set_title(f"crosstalk from channel {aggressor} into its neighbours", fontsize=8)
        handles = [s for s in series if s.get_visible()] + ([limit] if highs else [])
        ax.legend(handles=handles, fontsize=7, loc="upper right")
        channels = [r.channel for r in rows if r.channel is not None]
        lo, hi = min(channels, default=aggressor), max(channels, default=aggressor)
        ax.set_xlim(min(lo, aggressor) - 1, max(hi, aggressor) + 1)
        zero.set_xdata([min(lo, aggressor) - 1, max(hi, aggressor) + 1])
        limit.set_xdata([min(lo, aggressor) - 1, max(hi, aggressor) + 1])
        ax.set_xticks(range(min(lo, aggressor), max(hi, aggressor) + 1))
        vals = [r.value for r in rows] + highs + [0.0]
        span = (max(vals) - min(vals)) or 1.0
        ax.set_ylim(min(vals) - 0.1 * span, max(vals) + 0.25 * span)
        return _png(fig)

    def histogram(
        self, values: Sequence[float], low: float | None, high: float | None, title: str, unit: str
    ) -> bytes:
        """Histogram of a quantity across channels with its limits as dashed lines (batch report)."""
        fig, ax = self._get("histogram")
        ax.cla()
        _fixed_title(ax)
        data = np.asarray([v for v in values if v is not None and math.isfinite(v)], dtype=float)
        if data.size:
            ax.hist(
                data,
                bins=max(5, min(30, int(math.sqrt(data.size)) * 2)),
                color="#9e9e9e",
                edgecolor="black",
                hatch="//",
                linewidth=0.6,
            )
        for bound, style, name in ((low, "--", "low limit"), (high, ":", "high limit")):
            if bound is not None:
                ax.axvline(bound, color="black", linestyle=style, linewidth=1.4, label=name)
        ax.set_title(title, fontsize=9)
        ax.set_xlabel(unit, fontsize=8)
        ax.set_ylabel("channels", fontsize=8)
        ax.tick_params(labelsize=7)
        if low is not None or high is not None:
            ax.legend(fontsize=7)
        return _png(fig)


def series_handles(series: Sequence[tuple[Any, Any]]) -> list[Any]:
    return [pts for pts, _ in series]


def _draw_transfer(top: Any, bottom: Any, art: dict[str, Any], c: TransferCurve) -> None:
    a = np.asarray(c.amplitudes_mV, dtype=float)
    h = np.asarray(c.heights_mV, dtype=float)
    art["pts"].set_data(a, h)
    top.set_title(f"output {c.output}: transfer curve", fontsize=8)
    if c.gain is not None and c.offset_mV is not None:
        line = c.gain * a + c.offset_mV
        span = abs(c.gain) * float(np.ptp(a)) or 1.0
        art["fit"].set_data(a, line)
        art["fit"].set_visible(True)
        art["res"].set_data(a, 100.0 * (h - line) / span)
        art["res"].set_visible(True)
        inl = "" if c.inl_pct is None else f", INL {c.inl_pct:.3g} %"
        art["text"].set_text(f"gain {c.gain:.4g} V/V{inl}")
    else:
        art["fit"].set_visible(False)
        art["res"].set_visible(False)
        art["text"].set_text("no fit stored")
    art["zero"].set_xdata([a.min(), a.max()])
    _rescale(top)
    _rescale(bottom)


def _draw_s_curve(pts: Any, fit: Any, c: SCurve) -> None:
    x = np.asarray(c.thresholds_mV, dtype=float)
    counts = np.asarray(c.counts, dtype=float)
    norm = c.trials if c.trials > 0 else max(1.0, float(counts.max()))
    pts.set_data(x, counts / norm)
    label = c.label
    mu = c.threshold_mV if c.threshold_mV is not None else c.fit_mu_mV
    sigma = c.sigma_mV if c.sigma_mV is not None else c.fit_sigma_mV
    if mu is not None and sigma is not None and sigma > 0:
        from scipy.special import erfc

        grid = np.linspace(x.min(), x.max(), 200)
        # efficiency = ½ erfc((thr − μ)/(√2 σ)) (REFERENCES.md, threshold scans); on a
        # negative-going output it fires below the threshold, so the efficiency rises with it
        sign = -1.0 if counts[np.argmax(x)] > counts[np.argmin(x)] else 1.0
        fit.set_data(grid, 0.5 * erfc(sign * (grid - mu) / (math.sqrt(2.0) * sigma)))
        fit.set_visible(True)
        label += f": μ {mu:.4g} mV, σ {sigma:.3g} mV"
    pts.set_label(label)


def _draw_pulse(ax: Any, art: dict[str, Any], s: PulseShape) -> None:
    y = np.asarray(s.samples_mV, dtype=float)
    t = s.t0_ns + s.dt_ns * np.arange(y.size)
    art["trace"].set_data(t, y)
    ipk = int(np.argmax(np.abs(y - np.median(y))))  # the peak of a pulse of either polarity
    art["peak"].set_data([t[ipk]], [y[ipk]])
    if s.value is not None and s.quantity == "peaking_time_ns":
        art["span"].set_data([t[ipk] - s.value, t[ipk]], [y[ipk] * 0.5] * 2)
        art["span"].set_visible(True)
    else:
        art["span"].set_visible(False)
    name = "peaking time" if s.quantity == "peaking_time_ns" else "rise time"
    value = "—" if s.value is None else f"{s.value:.4g} ns"
    ax.set_title(f"output {s.output}: {name} {value}", fontsize=8)
    _rescale(ax)


def _build_transfer() -> tuple[Any, Any]:
    fig = new_figure(7.4, 3.9)
    grid = fig.add_gridspec(
        2,
        MAX_OUTPUTS,
        height_ratios=(2.2, 1.0),
        left=0.08,
        right=0.985,
        bottom=0.12,
        top=0.93,
        wspace=0.32,
        hspace=0.12,
    )
    cols = []
    for i in range(MAX_OUTPUTS):
        top = _fixed_title(fig.add_subplot(grid[0, i]))
        bottom = _fixed_title(fig.add_subplot(grid[1, i], sharex=top))
        art = {
            "pts": top.plot(
                [], [], linestyle="none", marker=MARKERS[i], color="black", ms=4, label="measured"
            )[0],
            "fit": top.plot([], [], linestyle=LINESTYLES[1], color=COLOURS[1], lw=1.0, label="fit")[
                0
            ],
            "res": bottom.plot(
                [], [], linestyle=":", marker=MARKERS[i], color="black", ms=3, lw=0.8
            )[0],
            "zero": bottom.axhline(0.0, color="0.4", lw=0.6),
            "text": top.text(0.03, 0.95, "", transform=top.transAxes, fontsize=7, va="top"),
        }
        top.tick_params(labelsize=7, labelbottom=False)
        bottom.tick_params(labelsize=7)
        bottom.set_xlabel("injected amplitude (mV)", fontsize=7)
        if i == 0:
            top.set_ylabel("pulse height (mV)", fontsize=7)
            bottom.set_ylabel("residual (% span)", fontsize=7)
            top.legend(fontsize=6, loc="lower right")
        cols.append((top, bottom, art))
    return fig, cols


def _build_s_curve() -> tuple[Any, Any]:
    fig = new_figure(7.4, 2.9)
    ax = _fixed_title(fig.add_axes((0.08, 0.15, 0.9, 0.76)))
    series = []
    for i in range(MAX_SERIES):
        pts = ax.plot(
            [],
            [],
            linestyle="none",
            marker=MARKERS[i],
            color=COLOURS[i],
            ms=4,
            mfc="none" if i % 2 else COLOURS[i],
        )[0]
        fit = ax.plot([], [], linestyle=LINESTYLES[i], color=COLOURS[i], lw=1.0)[0]
        series.append((pts, fit))
    ax.set_xlabel("threshold (mV)", fontsize=8)
    ax.set_ylabel("efficiency (counts / trials)", fontsize=8)
    ax.set_title("discriminator S-curves", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.grid(True, color="0.85", lw=0.5)
    return fig, (ax, series)


def _build_pulse() -> tuple[Any, Any]:
    fig = new_figure(7.4, 2.4)
    cols = []
    for i in range(MAX_OUTPUTS):
        ax = _fixed_title(fig.add_axes((0.08 + i * 0.315, 0.19, 0.255, 0.69)))
        art = {
            "trace": ax.plot([], [], color="black", lw=0.9)[0],
            "peak": ax.plot([], [], linestyle="none", marker="v", color=COLOURS[2], ms=6)[0],
            "span": ax.plot([], [], linestyle="--", marker="|", color=COLOURS[1], ms=8, lw=1.0)[0],
        }
        ax.tick_params(labelsize=7)
        ax.set_xlabel("time (ns)", fontsize=7)
        if i == 0:
            ax.set_ylabel("mV", fontsize=7)
        cols.append((ax, art))
    return fig, cols


def _build_crosstalk() -> tuple[Any, Any]:
    fig = new_figure(7.4, 2.4)
    ax = _fixed_title(fig.add_axes((0.08, 0.19, 0.9, 0.69)))
    series = [
        ax.plot(
            [],
            [],
            linestyle="none",
            marker=MARKERS[i],
            color=COLOURS[i],
            ms=6,
            mfc="none" if i % 2 else COLOURS[i],
        )[0]
        for i in range(MAX_SERIES)
    ]
    limit = ax.plot([0, 1], [0, 0], linestyle="--", color="black", lw=1.0, label="limit")[0]
    zero = ax.plot([0, 1], [0, 0], color="0.5", lw=0.6)[0]
    ax.set_xlabel("victim channel", fontsize=8)
    ax.set_ylabel("crosstalk (%)", fontsize=8)
    ax.tick_params(labelsize=7)
    return fig, (ax, series, limit, zero)


def _build_histogram() -> tuple[Any, Any]:
    fig = new_figure(5.0, 2.6)
    ax = fig.add_axes((0.12, 0.2, 0.84, 0.68))
    return fig, ax


_BUILDERS = {
    "transfer": _build_transfer,
    "s_curve": _build_s_curve,
    "pulse": _build_pulse,
    "crosstalk": _build_crosstalk,
    "histogram": _build_histogram,
}
