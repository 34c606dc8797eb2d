"""Rows for ``benchwright export`` read through SQLAlchemy (any database); their text is ``rows.py``'s.

The export columns and their order are fixed by DESIGN.md (``rows.EXPORT_COLUMNS``).
"""

from __future__ import annotations

from datetime import datetime
from typing import TYPE_CHECKING, Any

from sqlalchemy import select

from sequencer.store.models import Measurement, Run
from sequencer.store.queries import run_filters
from sequencer.store.rows import (
    EXPORT_COLUMNS,
    RUN_COLUMNS,
    Format,
    format_rows,
    iso_utc,
    run_rows,
)

if TYPE_CHECKING:
    from sequencer.store.store import Store

__all__ = ["EXPORT_COLUMNS", "RUN_COLUMNS", "Format", "export_rows", "format_rows", "iso_utc",
           "run_rows"]

_RUN_PART = (Run.id, Run.started_at, Run.procedure, Run.procedure_version, Run.procedure_sha256,
             Run.bench, Run.board)  # fmt: skip
_MEASUREMENT_PART = (Measurement.run_id, Measurement.channel, Measurement.output,
                     Measurement.aggressor, Measurement.quantity, Measurement.value,
                     Measurement.uncertainty, Measurement.unit, Measurement.low, Measurement.high,
                     Measurement.verdict, Measurement.qualifier, Measurement.reason)  # fmt: skip


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
