"""What listings and the live view read: slim run lines, batches, counts per run (measurements,
failed values, finished steps, the last step written), a run's latest trace.  One grouped query
per table, however many runs are asked for.

A run's verdict follows from the counts: ``fail`` as soon as one value is outside its limits,
``pass`` for a completed run with none outside, ``""`` (not judged yet) otherwise.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import Connection, case, func, select

from drivers.trace import Trace
from sequencer.store.lines import LINE_COLUMNS, BatchLine, RunCounts, RunLine
from sequencer.store.models import Measurement, Run, Step
from sequencer.store.models import Trace as TraceRow
from sequencer.store.queries import run_filters
from sequencer.store.stored import stored_trace

__all__ = ["BatchLine", "RunCounts", "RunLine", "batch_lines", "count_runs", "last_position",
           "latest_trace", "run_counts", "run_lines"]


def run_counts(
    conn: Connection, run_ids: Sequence[int], *, steps: bool = True
) -> dict[int, RunCounts]:
    """``run_id -> RunCounts`` for each of ``run_ids`` (runs with nothing stored get zeros);
    ``steps=False`` leaves the step counts at zero (a listing needs only the verdicts)."""
    ids = list(dict.fromkeys(int(i) for i in run_ids))
    if not ids:
        return {}
    measured = {
        r[0]: (int(r[1]), int(r[2] or 0))
        for r in conn.execute(
            select(
                Measurement.run_id,
                func.count(Measurement.id),
                func.sum(case((Measurement.verdict == "fail", 1), else_=0)),
            )
            .where(Measurement.run_id.in_(ids))
            .group_by(Measurement.run_id)
        )
    }
    stepped = {} if not steps else {
        r[0]: (int(r[1] or 0), int(r[2] or 0), int(r[3]))
        for r in conn.execute(
            select(
                Step.run_id,
                func.sum(case((Step.status == "completed", 1), else_=0)),
                func.sum(case((Step.status == "failed", 1), else_=0)),
                func.max(Step.id),
            )
            .where(Step.run_id.in_(ids))
            .group_by(Step.run_id)
        )
    }
    last = {}
    if stepped:
        last_ids = [v[2] for v in stepped.values()]
        last = {
            r[0]: (r[1], r[2])
            for r in conn.execute(
                select(Step.run_id, Step.path, Step.finished_at).where(Step.id.in_(last_ids))
            )
        }
    out = {}
    for run_id in ids:
        n, failed = measured.get(run_id, (0, 0))
        done, bad, _ = stepped.get(run_id, (0, 0, 0))
        path, at = last.get(run_id, ("", None))
        out[run_id] = RunCounts(
            run_id=run_id,
            measurements=n,
            failed=failed,
            steps_done=done,
            steps_failed=bad,
            last_step=path,
            last_step_at=at,
        )
    return out


_LINE_COLUMNS = tuple(getattr(Run, name) for name in LINE_COLUMNS)


def run_lines(
    conn: Connection,
    *,
    operator: str | None = None,
    limit: int | None = None,
    offset: int = 0,
    newest_first: bool = True,
    **filters: Any,
) -> list[RunLine]:
    """Runs matching ``run_filters(**filters)`` (and ``operator``), newest first by default."""
    clauses = run_filters(**filters)
    if operator is not None:
        clauses.append(Run.operator == operator)
    order = (Run.started_at.desc(), Run.id.desc()) if newest_first else (Run.started_at, Run.id)
    query = select(*_LINE_COLUMNS).where(*clauses).order_by(*order).offset(offset)
    if limit is not None:
        query = query.limit(limit)
    return [RunLine(*row) for row in conn.execute(query)]


def count_runs(conn: Connection, *, operator: str | None = None, **filters: Any) -> int:
    clauses = run_filters(**filters)
    if operator is not None:
        clauses.append(Run.operator == operator)
    return int(conn.execute(select(func.count(Run.id)).where(*clauses)).scalar_one())


def batch_lines(conn: Connection) -> list[BatchLine]:
    """Every named batch, most recently started first."""
    query = (
        select(
            Run.batch,
            func.count(Run.id),
            func.count(func.distinct(Run.board)),
            func.sum(case((Run.status == "running", 1), else_=0)),
            func.min(Run.started_at),
            func.max(Run.started_at),
        )
        .where(Run.batch != "")
        .group_by(Run.batch)
        .order_by(func.max(Run.started_at).desc())
    )
    return [
        BatchLine(
            batch=r[0], runs=int(r[1]), boards=int(r[2]), running=int(r[3] or 0),
            first_started=_aware(r[4]), last_started=_aware(r[5]),
        )
        for r in conn.execute(query)
    ]


def _aware(value: Any) -> Any:
    """min/max keep the column type (aware UTC); guard against a driver handing back text."""
    if isinstance(value, str):
        value = datetime.fromisoformat(value)
    if isinstance(value, datetime) and value.tzinfo is None:
        return value.replace(tzinfo=UTC)
    return value.astimezone(UTC) if isinstance(value, datetime) else value


def latest_trace(conn: Connection, run_id: int) -> Trace | None:
    """The run's most recently stored trace (the live view shows it), or None."""
    row = (
        conn.execute(
            select(Step.path, *TraceRow.__table__.c)
            .join(Step, Step.id == TraceRow.step_id)
            .where(TraceRow.run_id == run_id)
            .order_by(TraceRow.id.desc())
            .limit(1)
        )
        .mappings()
        .first()
    )
    if row is None:
        return None
    return stored_trace(row)


def last_position(conn: Connection, run_id: int) -> int | None:
    """The highest plan position of the run's finished steps (None before the first)."""
    return conn.execute(select(func.max(Step.position)).where(Step.run_id == run_id)).scalar_one()
