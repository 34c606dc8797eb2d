"""Rows for ``benchwright export`` and ``benchwright runs``, and their csv / json / table text.

The export columns and their order are fixed by DESIGN.md.  Values keep their exact meaning:
floats are written with ``repr`` (shortest text that reads back to the same double), empty fields are
empty strings in CSV and ``null`` in JSON, times are ISO 8601 in UTC.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterable, Mapping, Sequence
from datetime import datetime
from typing import TYPE_CHECKING, Any, Literal

from sqlalchemy import select

from sequencer.store.models import Measurement, Run
from sequencer.store.queries import run_filters

if TYPE_CHECKING:
    from sequencer.store.store import Store

EXPORT_COLUMNS: tuple[str, ...] = (
    "run_id", "started_at", "procedure", "procedure_version", "procedure_sha256", "bench", "board",
    "channel", "output", "aggressor", "quantity", "value", "uncertainty", "unit", "low", "high",
    "verdict", "qualifier", "reason",
)  # DESIGN.md's columns, then the decision rule's qualifier and why a value is empty  # fmt: skip
RUN_COLUMNS: tuple[str, ...] = (
    "id", "procedure", "board", "status", "start", "end", "verdict", "operator", "batch",
)  # DESIGN.md's six, then the verdict (pass / fail / empty while not judged), operator, batch  # fmt: skip
Format = Literal["csv", "json", "table"]

_RUN_PART = (Run.id, Run.started_at, Run.procedure, Run.procedure_version, Run.procedure_sha256,
             Run.bench, Run.board)  # fmt: skip
_MEASUREMENT_PART = (Measurement.run_id, Measurement.channel, Measurement.output,
                     Measurement.aggressor, Measurement.quantity, Measurement.value,
                     Measurement.uncertainty, Measurement.unit, Measurement.low, Measurement.high,
                     Measurement.verdict, Measurement.qualifier, Measurement.reason)  # fmt: skip


def iso_utc(when: datetime | None) -> str | None:
    """ISO 8601 text of an aware UTC datetime (``2025-03-04T09:30:00.250000+00:00``)."""
    return None if when is None else when.isoformat()


def export_rows(
    store: Store,
    run_id: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    batch: str | None = None,
) -> list[dict[str, Any]]:
    """Measurements of the matching runs as dicts keyed exactly by ``EXPORT_COLUMNS`` (in order),
    by run, then in the order they were recorded."""
    clauses = run_filters(
        run_id=run_id, board=board, procedure=procedure, since=since, until=until, batch=batch
    )
    query = select(*_MEASUREMENT_PART).order_by(Measurement.run_id, Measurement.id)
    if run_id is not None and len(clauses) == 1:
        query = query.where(Measurement.run_id == run_id)
    elif clauses:
        query = query.join(Run, Run.id == Measurement.run_id).where(*clauses)
    with store.engine.connect() as conn:
        runs = {
            r[0]: (r[0], iso_utc(r[1]), *r[2:])
            for r in conn.execute(select(*_RUN_PART).where(*clauses))
        }
        columns = EXPORT_COLUMNS
        return [
            dict(zip(columns, runs[m[0]] + tuple(m[1:]), strict=True)) for m in conn.execute(query)
        ]


def run_rows(runs: Iterable[Any], verdicts: Mapping[int, str] | None = None) -> list[dict[str, Any]]:
    """One dict per run keyed by ``RUN_COLUMNS`` (for ``benchwright runs``); ``verdicts`` maps run
    id to its verdict (``store.overview.RunCounts.verdict``), empty where not given."""
    given = verdicts or {}
    return [
        {
            "id": r.id,
            "procedure": r.procedure,
            "board": r.board,
            "status": r.status,
            "start": iso_utc(r.started_at),
            "end": iso_utc(r.ended_at),
            "verdict": given.get(r.id, ""),
            "operator": r.operator,
            "batch": r.batch,
        }
        for r in runs
    ]


def _text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, datetime):
        return value.isoformat()
    return str(value)


def _json_value(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None  # JSON has no inf / nan
    if isinstance(value, datetime):
        return value.isoformat()
    return value


def format_rows(rows: Sequence[Mapping[str, Any]], fmt: Format, columns: Sequence[str]) -> str:
    """``rows`` as CSV (header line, ``\\n`` line ends), a JSON array of objects, or an aligned table."""
    if fmt == "csv":
        out = io.StringIO()
        w = csv.writer(out, lineterminator="\n")
        w.writerow(columns)
        w.writerows([_text(row.get(c)) for c in columns] for row in rows)
        return out.getvalue()
    if fmt == "json":
        objects = [{c: _json_value(row.get(c)) for c in columns} for row in rows]
        return json.dumps(objects, indent=2, allow_nan=False) + "\n"
    if fmt == "table":
        cells = [[_text(row.get(c)) for c in columns] for row in rows]
        widths = [max([len(c), *(len(r[i]) for r in cells)]) for i, c in enumerate(columns)]
        lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths, strict=True)).rstrip()]
        lines.append("  ".join("-" * w for w in widths))
        lines += [
            "  ".join(v.ljust(w) for v, w in zip(r, widths, strict=True)).rstrip() for r in cells
        ]
        return "\n".join(lines) + "\n"
    raise ValueError(f"unknown format {fmt!r}: use csv, json or table")
