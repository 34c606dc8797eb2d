"""Recording the runner's events: what is buffered, what is written, and in which transaction.

* ``TraceCaptured`` and ``MeasurementMade`` are buffered per (run, step path).
* ``StepFinished`` *completed*: the step row, its traces and its measurements in ONE transaction
  (Core bulk inserts), so a run cut by SIGKILL or power loss keeps exactly its completed steps.
* ``StepFinished`` *failed* or *skipped*: the step row (status, error, settings, results) is written,
  its buffered traces and measurements are dropped: only completed steps carry data, so a failed
  attempt never shows up in an export or a trend and can be retried on resume.
* ``StepFinished`` *replayed*: nothing is written (the step's row is there from the earlier attempt).
* ``SafetyEvent``: written at once in its own transaction (it must survive an abort mid-step).
* ``RunFinished``: the run's status, end and reason, plus an audit annotation.

A run recorded under a lease (``hold``) is checked before each step and status write: once another
process took the run over, a step is refused (``LeaseLost``) and the final status is only noted
beside the run (``lifecycle.finish_run``), never written over the new owner's.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy import Engine, Table, insert

from sequencer.errors import LeaseLost
from sequencer.events import (
    Event,
    Measurement,
    MeasurementMade,
    RunFinished,
    SafetyEvent,
    StepFinished,
    StepStarted,
    TraceCaptured,
)
from sequencer.store import lease, lifecycle
from sequencer.store.connect import writer
from sequencer.store.models import Base
from sequencer.store.tracecodec import ENCODING, encode_samples

STEPS: Table = Base.metadata.tables["steps"]
TRACES: Table = Base.metadata.tables["traces"]
MEASUREMENTS: Table = Base.metadata.tables["measurements"]
SAFETY: Table = Base.metadata.tables["safety_events"]
LABELS: Table = Base.metadata.tables["step_labels"]


def label_rows(run_id: int, step_id: int, labels: Mapping[str, Any]) -> list[dict[str, Any]]:
    """One typed row per label: ints, floats and booleans in ``number``, anything else as ``text``."""
    rows = []
    for name, value in labels.items():
        row: dict[str, Any] = {"run_id": run_id, "step_id": step_id, "name": str(name)}
        if isinstance(value, bool | np.bool_):
            row |= {"type": "bool", "number": float(bool(value)), "text": None}
        elif isinstance(value, int | np.integer):
            row |= {"type": "int", "number": float(value), "text": None}
        elif isinstance(value, float | np.floating) and math.isfinite(float(value)):
            row |= {"type": "float", "number": float(value), "text": None}
        else:
            row |= {"type": "text", "number": None, "text": str(value)}
        rows.append(row)
    return rows


@dataclass
class _Pending:
    position: int | None = None
    traces: list[TraceCaptured] = field(default_factory=list)
    measurements: list[Measurement] = field(default_factory=list)


def _opt_float(x: Any) -> float | None:
    if x is None:
        return None
    x = float(x)
    return None if math.isnan(x) else x


def _opt_int(x: Any) -> int | None:
    return None if x is None else int(x)


def measurement_rows(run_id: int, step_id: int, ms: list[Measurement]) -> list[dict[str, Any]]:
    """Rows for the measurements table (NaN stored as NULL; numpy scalars made plain)."""
    return [
        {
            "run_id": run_id,
            "step_id": step_id,
            "quantity": m.quantity,
            "value": _opt_float(m.value),
            "uncertainty": _opt_float(m.uncertainty),
            "unit": m.unit,
            "channel": _opt_int(m.channel),
            "output": m.output,
            "aggressor": _opt_int(m.aggressor),
            "low": _opt_float(m.low),
            "high": _opt_float(m.high),
            "verdict": m.verdict,
            "qualifier": m.qualifier,
            "reason": m.reason,
        }
        for m in ms
    ]


def trace_rows(run_id: int, step_id: int, traces: list[TraceCaptured]) -> list[dict[str, Any]]:
    """Rows for the traces table: samples as compressed ``.npy``, dtype as captured."""
    rows = []
    for t in traces:
        samples = np.asarray(t.samples)
        rows.append(
            {
                "run_id": run_id,
                "step_id": step_id,
                "name": t.name,
                "encoding": ENCODING,
                "dtype": samples.dtype.str,
                "n_samples": int(samples.shape[-1]) if samples.ndim else 1,
                "dt_s": float(t.dt_s),
                "t0_s": float(t.t0_s),
                "source": t.source,
                "averages": int(t.averages),
                "labels": dict(t.labels),
                "meta": {str(k): str(v) for k, v in t.meta.items()},
                "data": encode_samples(samples),
            }
        )
    return rows


class Recorder:
    """Subscriber that writes a run's events to the database (see the module docstring).

    One recorder per store; call ``handle`` from the runner's thread only.
    """

    def __init__(self, engine: Engine) -> None:
        self._engine = writer(engine)
        self._pending: dict[tuple[int, str], _Pending] = {}
        self._tokens: dict[int, str] = {}  # run id -> the lease this process holds on it
        self._handlers: dict[type, Callable[[Any], None]] = {
            StepStarted: self._step_started,
            TraceCaptured: self._trace,
            MeasurementMade: self._measurement,
            StepFinished: self._step_finished,
            SafetyEvent: self._safety,
            RunFinished: self._run_finished,
        }

    def handle(self, event: Event) -> None:
        """Buffer or write one event; events of other types (``RunStarted``) need nothing."""
        handler = self._handlers.get(type(event))
        if handler is not None:
            handler(event)

    def hold(self, run_id: int, token: str) -> None:
        """From now on, this recorder writes run ``run_id`` only while it holds ``token``."""
        self._tokens[run_id] = token

    def _check_lease(self, conn: Any, run_id: int) -> None:
        token = self._tokens.get(run_id)
        if token is not None and not lease.holds(conn, run_id, token):
            raise LeaseLost(
                f"run {run_id} was taken over by another process (its lease changed): "
                "this process writes nothing more into it"
            )

    def pending_paths(self, run_id: int) -> list[str]:
        """Steps of ``run_id`` that started and have not finished (their data is only in memory)."""
        return [path for (rid, path) in self._pending if rid == run_id]

    def _buffer(self, run_id: int, path: str) -> _Pending:
        return self._pending.setdefault((run_id, path), _Pending())

    def _step_started(self, e: StepStarted) -> None:
        self._pending[(e.run_id, e.path)] = _Pending(position=e.index)

    def _trace(self, e: TraceCaptured) -> None:
        self._buffer(e.run_id, e.path).traces.append(e)

    def _measurement(self, e: MeasurementMade) -> None:
        self._buffer(e.run_id, e.path).measurements.append(e.measurement)

    def _step_finished(self, e: StepFinished) -> None:
        pending = self._pending.pop((e.run_id, e.path), _Pending())
        if e.status == "replayed":
            return
        with self._engine.begin() as conn:
            self._check_lease(conn, e.run_id)
            step = {
                "run_id": e.run_id,
                "path": e.path,
                "kind": e.kind,
                "position": pending.position,
                "status": e.status,
                "started_at": e.started_at,
                "finished_at": e.finished_at,
                "settings": dict(e.settings),
                "results": dict(e.results),
                "error": e.error,
            }
            step_id = int(conn.execute(insert(STEPS).values(step)).inserted_primary_key[0])
            if e.status != "completed":
                return
            if e.labels:
                conn.execute(insert(LABELS), label_rows(e.run_id, step_id, e.labels))
            if pending.traces:
                conn.execute(insert(TRACES), trace_rows(e.run_id, step_id, pending.traces))
            if pending.measurements:
                rows = measurement_rows(e.run_id, step_id, pending.measurements)
                conn.execute(insert(MEASUREMENTS), rows)

    def _safety(self, e: SafetyEvent) -> None:
        row = {"run_id": e.run_id, "path": e.path, "kind": e.kind, "at": e.at}
        with self._engine.begin() as conn:
            conn.execute(insert(SAFETY).values(**row, detail=dict(e.detail)))

    def _run_finished(self, e: RunFinished) -> None:
        for key in [k for k in self._pending if k[0] == e.run_id]:
            del self._pending[key]
        with self._engine.begin() as conn:
            token = self._tokens.get(e.run_id)
            lifecycle.finish_run(conn, e.run_id, e.status, e.at, e.reason, token=token)
