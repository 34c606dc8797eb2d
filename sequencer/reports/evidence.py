"""The series behind a certificate's plots, as the engine stored them with each analysis step.

An analysis step keeps the series it computed in its results (``results["series"]``, see
``sequencer/engine/steps/series.py``): transfer-curve points with the residuals from the fitted
line, S-curve points with their fit, the mean pulse a timing was taken from with its landmarks.
This module only reads them: no report re-runs an analysis or parses a step path (a test checks
that the reports never import ``sequencer.analysis``).  Runs recorded before the engine kept its
series have none, and their certificates show no curves.

A run is read once into a :class:`RunSnapshot`; :func:`gather_evidence` picks one channel's series.
"""

from __future__ import annotations

import hashlib
import struct
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from sequencer.inputs import RunInput
from sequencer.quantities import judged_channels
from sequencer.records import StepResult

from .certificate_context import decision_rule
from .reading import StoreReader


@dataclass(frozen=True, kw_only=True)
class TransferCurve:
    output: str
    amplitudes_mV: tuple[float, ...]
    heights_mV: tuple[float, ...]
    gain: float | None
    offset_mV: float | None
    inl_pct: float | None
    residuals_mV: tuple[float, ...] = ()


@dataclass(frozen=True, kw_only=True)
class SCurve:
    label: str
    thresholds_mV: tuple[float, ...]
    counts: tuple[int, ...]
    trials: int
    threshold_mV: float | None  # the fit the engine made (μ)
    sigma_mV: float | None
    fit_mu_mV: float | None = field(default=None, metadata={"hashed": False})
    fit_sigma_mV: float | None = field(default=None, metadata={"hashed": False})


@dataclass(frozen=True, kw_only=True)
class PulseShape:
    output: str
    quantity: str
    value: float | None
    dt_ns: float
    t0_ns: float
    n_traces: int
    trace_sha256: str  # of the stored mean pulse (float64, little-endian)
    peak_ns: float | None = None
    peak_mV: float | None = None
    samples_mV: tuple[float, ...] = field(default=(), metadata={"hashed": False}, repr=False)




class RunSnapshot:
    """One run read from the store: record, measurements, completed steps, safety events, caveats
    and the quantities its limit set limits."""

    steps: Mapping[str, StepResult]  # path -> the completed step (its results keep the series)

    def __init__(self, store: StoreReader, run_id: int) -> None:
        self.store = store
        self.run_id = run_id
        self.run = store.get_run(run_id)
        self.measurements = tuple(store.measurements(run_id=run_id))
        # the series the plots print are in the steps' results; no certificate prints a trace, so
        # none is read (an 8-channel run stores ~100, most of what reading the run cost)
        self.steps = dict(store.completed_steps(run_id, traces=False))
        self.safety_events = tuple(store.safety_events(run_id))
        self.caveats = tuple(store.caveats(run_id))
        inputs = store.run_inputs(run_id)
        self.limit_quantities = _limit_quantities(inputs)
        self.decision_rule, self.coverage = decision_rule(inputs)
        # a module measured as a whole gets one certificate, CH00
        self.channels = judged_channels(m.channel for m in self.measurements)


def _limit_quantities(inputs: Iterable[RunInput]) -> frozenset[str]:
    """Quantities of the stored limit set (none when the run kept no limit set, or it no longer reads)."""
    from sequencer.errors import ProcedureError
    from sequencer.procedure.limits import parse_limits_text

    found: set[str] = set()
    for given in inputs:
        if given.kind != "limits":
            continue
        try:
            found |= {lim.quantity for lim in parse_limits_text(given.text, given.name)}
        except ProcedureError:
            continue  # a text of an older limits format: the judged values still say what was limited
    return frozenset(found)


def snapshot_run(store: StoreReader, run_id: int) -> RunSnapshot:
    return RunSnapshot(store, run_id)


def gather_evidence(
    snap: RunSnapshot, channel: int
) -> tuple[tuple[TransferCurve, ...], tuple[SCurve, ...], tuple[PulseShape, ...]]:
    """The stored series of ``channel``, in step order: transfer curves, S-curves, pulse shapes."""
    transfer: list[TransferCurve] = []
    s_curves: list[SCurve] = []
    pulses: list[PulseShape] = []
    for path in sorted(snap.steps):
        for series in (snap.steps[path].results or {}).get("series") or ():
            if not isinstance(series, Mapping) or series.get("channel") != channel:
                continue
            kind = series.get("kind")
            if kind == "transfer":
                transfer.append(_transfer(series))
            elif kind == "s_curve":
                s_curves.append(_s_curve(series))
            elif kind == "pulse":
                pulses.append(_pulse(series))
    return tuple(transfer), tuple(s_curves), tuple(pulses)


def _transfer(s: Mapping[str, Any]) -> TransferCurve:
    return TransferCurve(
        output=str(s.get("output") or ""),
        amplitudes_mV=_floats(s.get("x_mV")),
        heights_mV=_floats(s.get("y_mV")),
        residuals_mV=_floats(s.get("residual_mV")),
        gain=_num(s.get("gain")),
        offset_mV=_num(s.get("offset_mV")),
        inl_pct=_num(s.get("inl_pct")),
    )


def _s_curve(s: Mapping[str, Any]) -> SCurve:
    mu, sigma = _num(s.get("mu_mV")), _num(s.get("sigma_mV"))
    return SCurve(
        label=str(s.get("label") or "S-curve"),
        thresholds_mV=_floats(s.get("x_mV")),
        counts=tuple(int(n) for n in s.get("counts") or ()),
        trials=int(s.get("trials") or 0),
        threshold_mV=mu,
        sigma_mV=sigma,
        fit_mu_mV=mu,
        fit_sigma_mV=sigma,
    )


def _pulse(s: Mapping[str, Any]) -> PulseShape:
    mean = _floats(s.get("mean_mV"))
    return PulseShape(
        output=str(s.get("output") or ""),
        quantity=str(s.get("quantity") or ""),
        value=_num(s.get("value")),
        dt_ns=float(s.get("dt_ns") or 0.0),
        t0_ns=float(s.get("t0_ns") or 0.0),
        n_traces=int(s.get("n_traces") or 0),
        trace_sha256=mean_pulse_sha256(mean),
        peak_ns=_num(s.get("peak_ns")),
        peak_mV=_num(s.get("peak_mV")),
        samples_mV=mean,
    )


def mean_pulse_sha256(samples_mV: tuple[float, ...]) -> str:
    """SHA-256 of the mean pulse as float64, little-endian (IEEE 754 binary64): the bytes numpy's
    ``asarray(mean, dtype="<f8")`` holds, packed with ``struct`` so that verify need not import numpy."""
    return hashlib.sha256(struct.pack(f"<{len(samples_mV)}d", *samples_mV)).hexdigest()


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(float(v) if v is not None else float("nan") for v in values or ())


def _num(value: Any) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    return float(value)
