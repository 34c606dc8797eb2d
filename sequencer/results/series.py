"""The curve points behind a run's figures, one point a row, from the series the engine stored.

Each analysis step keeps the series it computed in its results (``results["series"]``, a list of
mappings with a ``kind``; ``sequencer/engine/steps/series.py`` and the sensor analyses write them).
``read_series`` turns every kind it knows into points through the table ``CONVERTERS`` (kind ->
function); a new kind is one more entry.  Runs recorded before the engine kept its series have none.

Kinds: ``transfer`` (x injected amplitude, y mean output height, both mV; ``residual`` from the
fitted line), ``s_curve`` (x threshold mV, y counts out of ``trials``), ``pulse`` (the mean pulse a
timing was taken from: x time ns, y mV), ``spectrum`` (x bin centre in the histogram's unit, y
counts, ``fit`` the fitted model's counts in that bin), ``gain_scan`` (x bias V, y gain with
``y_err``), ``staircase`` (x threshold mV, y dark-count rate Hz).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import asdict, dataclass
from typing import Any, Protocol, runtime_checkable

from sequencer.records import StepResult


@runtime_checkable
class StepsReader(Protocol):
    """What ``read_series`` reads: a run's completed steps by path (``Store``, ``LightRecords`` and
    any ``reports.reading.StoreReader`` answer it).  Only this one query, so that a caller with a
    narrower reader than the whole store can use it."""

    def completed_steps(self, run_id: int) -> dict[str, StepResult]: ...


@dataclass(frozen=True, kw_only=True)
class CurvePoint:
    """One point of a stored series (module docstring for the kinds and their units)."""

    step: str
    channel: int | None
    output: str | None
    series: str
    label: str
    x: float
    x_unit: str
    y: float
    y_unit: str
    trials: int | None = None
    residual: float | None = None
    fit: float | None = None
    y_err: float | None = None

    def as_row(self) -> dict[str, Any]:
        return asdict(self)


Convert = Callable[[str, Mapping[str, Any]], Iterator[CurvePoint]]


def _num(value: Any) -> float | None:
    return None if value is None else float(value)


def _at(values: Any, i: int) -> float | None:
    return _num(values[i]) if values is not None and i < len(values) else None


def _channel(s: Mapping[str, Any]) -> int | None:
    return None if s.get("channel") is None else int(s["channel"])


def _transfer(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    output = str(s.get("output") or "")
    for i, (x, y) in enumerate(zip(s.get("x_mV") or (), s.get("y_mV") or (), strict=False)):
        yield CurvePoint(step=step, channel=_channel(s), output=output or None, series="transfer",
                         label=f"transfer {output}".strip(), x=float(x), x_unit="mV", y=float(y),
                         y_unit="mV", residual=_at(s.get("residual_mV"), i))  # fmt: skip


def _s_curve(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    for x, n in zip(s.get("x_mV") or (), s.get("counts") or (), strict=False):
        yield CurvePoint(step=step, channel=_channel(s), output=None, series="s_curve",
                         label=str(s.get("label") or "S-curve"), x=float(x), x_unit="mV", y=float(n),
                         y_unit="counts", trials=int(s.get("trials") or 0))  # fmt: skip


def _pulse(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    output = str(s.get("output") or "")
    t0, dt = float(s.get("t0_ns") or 0.0), float(s.get("dt_ns") or 0.0)
    label = f"mean pulse {output} ({s.get('quantity', '')})".replace("  ", " ")
    for i, y in enumerate(s.get("mean_mV") or ()):
        yield CurvePoint(step=step, channel=_channel(s), output=output or None, series="pulse",
                         label=label, x=t0 + i * dt, x_unit="ns", y=float(y), y_unit="mV")  # fmt: skip


def _spectrum(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    edges = [float(e) for e in s.get("edges") or ()]
    for i, n in enumerate(s.get("counts") or ()):
        if i + 1 >= len(edges):
            break
        yield CurvePoint(step=step, channel=_channel(s), output=None, series="spectrum",
                         label=str(s.get("label") or "spectrum"), x=(edges[i] + edges[i + 1]) / 2.0,
                         x_unit=str(s.get("unit") or ""), y=float(n), y_unit="counts",
                         fit=_at(s.get("model"), i))  # fmt: skip


def _gain_scan(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    for i, (v, g) in enumerate(zip(s.get("bias_V") or (), s.get("gain") or (), strict=False)):
        yield CurvePoint(step=step, channel=_channel(s), output=None, series="gain_scan",
                         label="gain vs bias", x=float(v), x_unit="V", y=float(g), y_unit="1e6",
                         y_err=_at(s.get("gain_err"), i))  # fmt: skip


def _staircase(step: str, s: Mapping[str, Any]) -> Iterator[CurvePoint]:
    for x, rate in zip(s.get("thresholds_mV") or (), s.get("rate_hz") or (), strict=False):
        yield CurvePoint(step=step, channel=_channel(s), output=None, series="staircase",
                         label="dark-count staircase", x=float(x), x_unit="mV", y=float(rate),
                         y_unit="Hz")  # fmt: skip


CONVERTERS: dict[str, Convert] = {
    "transfer": _transfer,
    "s_curve": _s_curve,
    "pulse": _pulse,
    "spectrum": _spectrum,
    "gain_scan": _gain_scan,
    "staircase": _staircase,
}


def read_series(store: StepsReader, run_id: int) -> list[CurvePoint]:
    """Every stored series point of run ``run_id``'s completed steps, in step order; kinds not in
    ``CONVERTERS`` are left out (they have no agreed point form yet)."""
    points: list[CurvePoint] = []
    for path, step in store.completed_steps(run_id).items():
        for series in (step.results or {}).get("series") or ():
            convert = CONVERTERS.get(series.get("kind")) if isinstance(series, Mapping) else None
            if convert is not None:
                points.extend(convert(path, series))
    return points
