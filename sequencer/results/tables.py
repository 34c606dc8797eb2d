"""The store's results as plain column tables: runs, measurements, series and traces.

Every open format (CSV, JSON, Parquet, ROOT, pandas) is written from these tables, so each format
carries the same rows and keys.  A table declares the kind of each column once (``int``, ``float``,
``str``, ``time`` as aware UTC datetimes, ``samples`` as a float array per row); writers map kinds to
their own types, so a version such as ``"1.10"`` stays text in every format.

Keys: ``run_id`` everywhere, with ``board``, ``channel``, ``output`` and ``step`` (the stable step
path) where they apply.  Trace samples are in volts as captured; time of sample i is
``t0_s + i * dt_s``.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal

import numpy as np

from sequencer.results.series import read_series
from sequencer.store import EXPORT_COLUMNS, Store, export_rows
from sequencer.store.overview import run_counts

Kind = Literal["int", "float", "str", "time", "samples"]
What = Literal["runs", "measurements", "series", "traces"]
WHATS: tuple[str, ...] = ("runs", "measurements", "series", "traces")


@dataclass(frozen=True)
class Column:
    name: str
    kind: Kind


@dataclass(frozen=True, kw_only=True)
class Table:
    """Named columns of declared kinds and rows keyed by column name (in column order)."""

    name: str
    columns: tuple[Column, ...]
    rows: tuple[Mapping[str, Any], ...]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def values(self, name: str) -> list[Any]:
        """The column ``name`` as a list (None for missing values)."""
        return [row.get(name) for row in self.rows]


@dataclass(frozen=True, kw_only=True)
class Selection:
    """Which runs: every given filter must match (dates on the run's start, UTC, until exclusive)."""

    run_id: int | None = None
    board: str | None = None
    procedure: str | None = None
    batch: str | None = None
    since: datetime | None = None
    until: datetime | None = None

    def run_filters(self) -> dict[str, Any]:
        return {
            "board": self.board,
            "procedure": self.procedure,
            "batch": self.batch,
            "since": self.since,
            "until": self.until,
        }


def _columns(spec: Iterable[tuple[str, Kind]]) -> tuple[Column, ...]:
    return tuple(Column(n, k) for n, k in spec)


_MEASUREMENT_KINDS: dict[str, Kind] = {
    "run_id": "int", "started_at": "time", "channel": "int", "aggressor": "int", "value": "float",
    "uncertainty": "float", "low": "float", "high": "float",
}  # fmt: skip
MEASUREMENT_COLUMNS = _columns((n, _MEASUREMENT_KINDS.get(n, "str")) for n in EXPORT_COLUMNS)
RUN_COLUMNS = _columns((
    ("run_id", "int"), ("procedure", "str"), ("procedure_version", "str"), ("board", "str"),
    ("board_type", "str"), ("batch", "str"), ("operator", "str"), ("bench", "str"),
    ("status", "str"), ("reason", "str"), ("verdict", "str"), ("measurements", "int"),
    ("failed", "int"), ("started_at", "time"), ("ended_at", "time"), ("software_version", "str"),
    ("repeat_of", "int"),
))  # fmt: skip
SERIES_COLUMNS = _columns((
    ("run_id", "int"), ("board", "str"), ("step", "str"), ("channel", "int"), ("output", "str"),
    ("series", "str"), ("label", "str"), ("x", "float"), ("x_unit", "str"), ("y", "float"),
    ("y_unit", "str"), ("trials", "int"), ("residual", "float"), ("fit", "float"), ("y_err", "float"),
))  # fmt: skip
TRACE_COLUMNS = _columns((
    ("run_id", "int"), ("board", "str"), ("step", "str"), ("name", "str"), ("channel", "int"),
    ("output", "str"), ("source", "str"), ("averages", "int"), ("dt_s", "float"), ("t0_s", "float"),
    ("n_samples", "int"), ("samples_V", "samples"), ("labels", "str"), ("meta", "str"),
))  # fmt: skip

#: table name -> its columns (what ``export --what`` names)
COLUMNS_OF: Mapping[str, tuple[Column, ...]] = {
    "runs": RUN_COLUMNS,
    "measurements": MEASUREMENT_COLUMNS,
    "series": SERIES_COLUMNS,
    "traces": TRACE_COLUMNS,
}


def _runs(store: Store, sel: Selection) -> list[Any]:
    """The selected runs, oldest first; a run id that does not exist is a ``StoreError``."""
    if sel.run_id is None:
        return store.list_runs(**sel.run_filters())
    run = store.get_run(sel.run_id)
    wanted = {"board": sel.board, "procedure": sel.procedure, "batch": sel.batch}
    keep = all(v is None or getattr(run, k) == v for k, v in wanted.items())
    keep = keep and (sel.since is None or run.started_at >= sel.since)
    keep = keep and (sel.until is None or run.started_at < sel.until)
    return [run] if keep else []


def run_table(store: Store, sel: Selection = Selection()) -> Table:
    """One row per run with its status, verdict and counts (oldest first)."""
    runs = _runs(store, sel)
    with store.engine.connect() as conn:
        counts = run_counts(conn, [r.id for r in runs], steps=False)
    rows = []
    for r in runs:
        c = counts[r.id]
        rows.append({
            "run_id": r.id, "procedure": r.procedure, "procedure_version": r.procedure_version,
            "board": r.board, "board_type": r.board_type, "batch": r.batch, "operator": r.operator,
            "bench": r.bench, "status": r.status, "reason": r.reason, "verdict": c.verdict(r.status),
            "measurements": c.measurements, "failed": c.failed, "started_at": r.started_at,
            "ended_at": r.ended_at, "software_version": r.software_version, "repeat_of": r.repeat_of,
        })  # fmt: skip
    return Table(name="runs", columns=RUN_COLUMNS, rows=tuple(rows))


def measurement_table(store: Store, sel: Selection = Selection()) -> Table:
    """The DESIGN.md export columns, one row per judged value."""
    rows = [
        {**row, "started_at": datetime.fromisoformat(row["started_at"])}
        for row in export_rows(store, run_id=sel.run_id, **sel.run_filters())
    ]
    return Table(name="measurements", columns=MEASUREMENT_COLUMNS, rows=tuple(rows))


def _label_int(labels: Mapping[str, Any], key: str) -> int | None:
    value = labels.get(key)
    try:
        return None if value is None or isinstance(value, bool) else int(value)
    except (TypeError, ValueError):
        return None


def trace_table(store: Store, sel: Selection = Selection()) -> Table:
    """One row per stored trace, with its samples (volts, float64), labels and meta as JSON text.

    ``meta`` is what the capture knew (``rails_mV``: the input's range, to check for clipping); a
    trace stored before revision 0008 says it was not kept (``drivers.trace.META_NOT_STORED``)."""
    rows = []
    for run in _runs(store, sel):
        for t in store.traces(run.id):
            labels = dict(t.labels or {})
            samples = np.asarray(t.volts, dtype=np.float64)
            rows.append({
                "run_id": run.id, "board": run.board, "step": t.path, "name": t.name,
                "channel": _label_int(labels, "channel"),
                "output": None if labels.get("output") is None else str(labels["output"]),
                "source": t.source, "averages": int(t.averages), "dt_s": float(t.dt_s),
                "t0_s": float(t.t0_s), "n_samples": int(samples.size), "samples_V": samples,
                "labels": json.dumps(labels, sort_keys=True, default=str),
                "meta": json.dumps(dict(t.meta or {}), sort_keys=True),
            })  # fmt: skip
    return Table(name="traces", columns=TRACE_COLUMNS, rows=tuple(rows))


def series_table(store: Store, sel: Selection = Selection()) -> Table:
    """One row per point of each stored series (transfer, S-curve, pulse, spectrum, ...) of the
    selected runs."""
    rows = []
    for run in _runs(store, sel):
        for point in read_series(store, run.id):
            rows.append({"run_id": run.id, "board": run.board, **point.as_row()})
    return Table(name="series", columns=SERIES_COLUMNS, rows=tuple(rows))


_BUILDERS = {
    "runs": run_table,
    "measurements": measurement_table,
    "series": series_table,
    "traces": trace_table,
}


def read_table(store: Store, what: str, sel: Selection = Selection()) -> Table:
    """The table ``what`` (one of ``WHATS``) for the selected runs."""
    try:
        build = _BUILDERS[what]
    except KeyError:
        raise ValueError(f"unknown table {what!r}: use one of {', '.join(WHATS)}") from None
    return build(store, sel)


def column_kinds(table: Table) -> Sequence[Kind]:
    return [c.kind for c in table.columns]
