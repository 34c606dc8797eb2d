"""Light-sensor evidence on certificates: the fitted spectra (LED finger spectrum, muon spectrum) and
the gain scan and the dark-count staircase a sensor or module run stored with its analysis steps
(``results["series"]``, kinds ``spectrum``, ``gain_scan`` and ``staircase``; STYLE.md rule 17: drawn as stored, never re-fitted)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

MAX_PANELS = 5


@dataclass(frozen=True)
class Spectrum:
    """A histogram (``edges`` in ``unit``, ``counts``) with its fitted ``model`` counts per bin; for
    ``label`` "gain scan", gain (10⁶) against bias (V) in ``edges``/``counts`` with the line's values
    in ``model``; for "dark-count staircase", rate (Hz) against threshold (mV) with the 0.5 and
    1.5 p.e. levels in ``model``."""

    label: str
    unit: str
    edges: tuple[float, ...]
    counts: tuple[float, ...]
    model: tuple[float, ...]


def gather_spectra(snap: Any, channel: int) -> tuple[Spectrum, ...]:
    """The stored spectra and gain scans of ``channel``, in step order."""
    out: list[Spectrum] = []
    for path in sorted(snap.steps):
        for series in (snap.steps[path].results or {}).get("series") or ():
            if not isinstance(series, Mapping) or series.get("channel") != channel:
                continue
            if series.get("kind") == "spectrum":
                out.append(_spectrum(series))
            elif series.get("kind") == "gain_scan":
                out.append(_gain_scan(series))
            elif series.get("kind") == "staircase":
                out.append(_staircase(series))
    return tuple(out)


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(float(v) for v in values or ())


def _spectrum(s: Mapping[str, Any]) -> Spectrum:
    return Spectrum(
        label=str(s.get("label", "")),
        unit=str(s.get("unit", "")),
        edges=_floats(s.get("edges")),
        counts=_floats(s.get("counts")),
        model=_floats(s.get("model")),
    )


def _gain_scan(s: Mapping[str, Any]) -> Spectrum:
    volts = _floats(s.get("bias_V"))
    slope, v_bd = float(s.get("slope", 0.0)), float(s.get("breakdown_V", 0.0))
    return Spectrum(
        label="gain scan",
        unit="V",
        edges=volts,
        counts=_floats(s.get("gain")),
        model=tuple(slope * (v - v_bd) for v in volts),
    )


def _staircase(s: Mapping[str, Any]) -> Spectrum:
    """Dark-count rate against threshold; ``model`` marks the 0.5 and 1.5 p.e. levels (mV)."""
    gain, pedestal = float(s.get("gain_mV", 0.0)), float(s.get("pedestal_mV", 0.0))
    return Spectrum(
        label="dark-count staircase",
        unit="mV",
        edges=_floats(s.get("thresholds_mV")),
        counts=_floats(s.get("rate_hz")),
        model=(pedestal + 0.5 * gain, pedestal + 1.5 * gain),
    )


def plot_spectra(spectra: Sequence[Spectrum]) -> bytes | None:
    """One panel per spectrum (counts as steps, the fit as a line) or gain scan (points, line)."""
    from .plots import _png, new_figure  # plotting is heavy and imports the certificate data

    panels = [s for s in spectra if s.counts][:MAX_PANELS]
    if not panels:
        return None
    fig = new_figure(6.5, 2.4 * len(panels))
    for i, s in enumerate(panels, start=1):
        ax = fig.add_subplot(len(panels), 1, i)
        if s.label == "dark-count staircase":
            ax.semilogy(
                s.edges,
                [max(c, 0.5) for c in s.counts],
                "o-",
                color="black",
                markersize=3,
                label="rate above threshold",
            )
            for level, style in zip(s.model, ("--", ":"), strict=False):
                ax.axvline(level, color="black", linestyle=style, linewidth=1)
            ax.set_xlabel("threshold (mV); lines at 0.5 and 1.5 p.e.", fontsize=8)
            ax.set_ylabel("rate (Hz)", fontsize=8)
        elif s.label == "gain scan":
            ax.plot(s.edges, s.counts, "o", color="black", label="gain from the finger spectrum")
            ax.plot(s.edges, s.model, "--", color="black", label="straight-line fit")
            ax.set_xlabel("bias (V)", fontsize=8)
            ax.set_ylabel("gain (10⁶)", fontsize=8)
        else:
            centres = [0.5 * (a + b) for a, b in zip(s.edges[:-1], s.edges[1:], strict=True)]
            ax.step(centres, s.counts, where="mid", color="#606060", label="measured")
            ax.plot(centres, s.model, "-", color="black", linewidth=1.2, label="fit")
            ax.set_xlabel(s.unit, fontsize=8)
            ax.set_ylabel("events per bin", fontsize=8)
        ax.set_title(s.label, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.legend(fontsize=7, loc="upper left" if s.label == "gain scan" else "upper right")
    fig.tight_layout()
    return _png(fig)
