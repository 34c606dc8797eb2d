"""Reading the record: runs, steps, traces, measurements, trends, notes, safety events.

Every function takes an open connection and returns frozen records (``records.py``).  Date filters
apply to the run's start: ``since`` inclusive, ``until`` exclusive, aware datetimes.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterable, Mapping
from datetime import datetime
from typing import Any

from sqlalchemy import ColumnElement, Connection, Select, select

from drivers.trace import Trace
from sequencer.errors import StoreError
from sequencer.inputs import TEXT_KINDS, RunInput, manifest_digest
from sequencer.records import Measurement as MeasurementRecord
from sequencer.records import StepResult
from sequencer.store.models import (
    Annotation,
    Document,
    Instrument,
    Measurement,
    Run,
    SafetyRecord,
    Step,
    StepLabel,
)
from sequencer.store.models import RunInput as RunInputRow
from sequencer.store.models import Trace as TraceRow
from sequencer.store.records import (
    Annotation as AnnotationRecord,
)
from sequencer.store.records import (
    RunRecord,
    SeriesPoint,
    StepRecord,
)
from sequencer.store.records import (
    SafetyRecord as SafetyRecordOut,
)
from sequencer.store.stored import (
    label_value,
    record,
    run_record,
    stored_measurement,
    stored_trace,
)


def run_filters(
    *,
    run_id: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    status: str | None = None,
    batch: str | None = None,
) -> list[ColumnElement[bool]]:
    """WHERE clauses on ``runs`` for the given filters (None = no filter)."""
    clauses: list[ColumnElement[bool]] = []
    for column, value in (
        (Run.id, run_id),
        (Run.board, board),
        (Run.procedure, procedure),
        (Run.status, status),
        (Run.batch, batch),
    ):
        if value is not None:
            clauses.append(column == value)
    if since is not None:
        clauses.append(Run.started_at >= since)
    if until is not None:
        clauses.append(Run.started_at < until)
    return clauses


def _run_records(conn: Connection, runs: Select[Any]) -> list[RunRecord]:
    rows = conn.execute(runs).mappings().all()
    if not rows:
        return []
    chosen = runs.subquery()
    ids = select(chosen.c.id)
    docs_of = select(chosen.c.procedure_doc).union(select(chosen.c.bench_doc))
    texts = dict(
        conn.execute(
            select(Document.sha256, Document.text).where(Document.sha256.in_(docs_of))
        ).all()
    )
    instruments: dict[int, list[Mapping[str, Any]]] = defaultdict(list)
    for i in conn.execute(
        select(*Instrument.__table__.c).where(Instrument.run_id.in_(ids)).order_by(Instrument.id)
    ).mappings():
        instruments[i["run_id"]].append(i)
    return [run_record(r, texts, instruments[r["id"]]) for r in rows]


def _runs(clauses: Iterable[ColumnElement[bool]]) -> Select[Any]:
    return select(*Run.__table__.c).where(*clauses)


def list_runs(conn: Connection, **filters: Any) -> list[RunRecord]:
    """Runs matching ``run_filters(**filters)``, oldest first."""
    return _run_records(conn, _runs(run_filters(**filters)).order_by(Run.started_at, Run.id))


def get_run(conn: Connection, run_id: int) -> RunRecord:
    found = list_runs(conn, run_id=run_id)
    if not found:
        raise StoreError(f"no run {run_id} in the database")
    return found[0]


def latest_run(conn: Connection, **filters: Any) -> RunRecord | None:
    query = _runs(run_filters(**filters)).order_by(Run.started_at.desc(), Run.id.desc()).limit(1)
    found = _run_records(conn, query)
    return found[0] if found else None


def steps(conn: Connection, run_id: int) -> list[StepRecord]:
    """Every finished step of a run (completed, failed, skipped), in the order written."""
    query = select(*Step.__table__.c).where(Step.run_id == run_id).order_by(Step.id)
    return [record(StepRecord, s) for s in conn.execute(query).mappings()]


def _trace_query(run_id: int) -> Select[Any]:
    return (
        select(Step.path, *TraceRow.__table__.c)
        .join(Step, Step.id == TraceRow.step_id)
        .where(TraceRow.run_id == run_id)
        .order_by(TraceRow.id)
    )


def traces(conn: Connection, run_id: int, path_prefix: str | None = None) -> list[Trace]:
    """The traces of a run's completed steps, optionally only under ``path_prefix``."""
    query = _trace_query(run_id)
    if path_prefix:
        query = query.where(Step.path.startswith(path_prefix, autoescape=True))
    return [stored_trace(t) for t in conn.execute(query).mappings()]


def _measurement_query(clauses: Iterable[ColumnElement[bool]]) -> Select[Any]:
    return (
        select(Step.path, *Measurement.__table__.c)
        .join(Run, Run.id == Measurement.run_id)
        .join(Step, Step.id == Measurement.step_id)
        .where(*clauses)
        .order_by(Measurement.run_id, Measurement.id)
    )


def measurements(conn: Connection, **filters: Any) -> list[MeasurementRecord]:
    """Measurements of the runs matching ``run_filters(**filters)``, by run then as recorded."""
    query = _measurement_query(run_filters(**filters))
    return [stored_measurement(m) for m in conn.execute(query).mappings()]


def completed_steps(conn: Connection, run_id: int, *, traces: bool = True) -> dict[str, StepResult]:
    """Path -> completed step with its settings, results, traces and measurements; ``traces=False``
    leaves the traces out (each step's ``traces`` empty) and reads none of them."""
    by_step_traces: dict[str, list[Trace]] = defaultdict(list)
    for t in conn.execute(_trace_query(run_id)).mappings() if traces else ():
        by_step_traces[t["path"]].append(stored_trace(t))
    by_step_ms: dict[str, list[MeasurementRecord]] = defaultdict(list)
    for m in conn.execute(_measurement_query([Measurement.run_id == run_id])).mappings():
        by_step_ms[m["path"]].append(stored_measurement(m))
    labels = step_labels(conn, run_id)
    query = (
        select(*Step.__table__.c)
        .where(Step.run_id == run_id, Step.status == "completed")
        .order_by(Step.id)
    )
    return {
        s["path"]: StepResult(
            labels=labels.get(s["id"], {}),
            path=s["path"],
            kind=s["kind"],
            started_at=s["started_at"],
            finished_at=s["finished_at"],
            settings=s["settings"],
            results=s["results"],
            traces=tuple(by_step_traces[s["path"]]),
            measurements=tuple(by_step_ms[s["path"]]),
        )
        for s in conn.execute(query).mappings()
    }


def quantity_series(
    conn: Connection,
    *,
    board: str,
    quantity: str,
    channel: int | None = None,
    output: str | None = None,
    procedure: str | None = None,
) -> list[SeriesPoint]:
    """A quantity over the completed runs of a board, oldest first (None = any channel/output)."""
    query = (
        select(Run.started_at, *Measurement.__table__.c)
        .join(Run, Run.id == Measurement.run_id)
        .where(*run_filters(board=board, procedure=procedure, status="completed"))
        .where(Measurement.quantity == quantity)
        .order_by(Run.started_at, Measurement.id)
    )
    if channel is not None:
        query = query.where(Measurement.channel == channel)
    if output is not None:
        query = query.where(Measurement.output == output)
    return [record(SeriesPoint, m) for m in conn.execute(query).mappings()]


def annotations(
    conn: Connection, run_id: int, *, notes_only: bool = False
) -> list[AnnotationRecord]:
    """The notes (and, unless ``notes_only``, the audit entries) of a run, oldest first."""
    query = (
        select(*Annotation.__table__.c).where(Annotation.run_id == run_id).order_by(Annotation.id)
    )
    if notes_only:
        query = query.where(Annotation.kind == "note")
    return [record(AnnotationRecord, a) for a in conn.execute(query).mappings()]


def safety_events(conn: Connection, run_id: int) -> list[SafetyRecordOut]:
    query = (
        select(*SafetyRecord.__table__.c)
        .where(SafetyRecord.run_id == run_id)
        .order_by(SafetyRecord.id)
    )
    return [record(SafetyRecordOut, s) for s in conn.execute(query).mappings()]


def run_inputs(conn: Connection, run_id: int) -> tuple[RunInput, ...]:
    """Every text the run used, in the order stored (none for runs recorded before revision 0003)."""
    rows = conn.execute(
        select(RunInputRow.kind, RunInputRow.name, Document.text)
        .join(Document, Document.sha256 == RunInputRow.document)
        .where(RunInputRow.run_id == run_id)
        .order_by(RunInputRow.id)
    ).all()
    return tuple(RunInput(kind, name, text) for kind, name, text in rows)


def text_digests(conn: Connection, procedure: str, version: str) -> dict[str, int]:
    """``sequencer.inputs.text_digest`` of the stored runs of ``procedure`` ``version`` -> the first
    run with that text (runs recorded before revision 0003 stored no fragments and are left out)."""
    rows = conn.execute(
        select(RunInputRow.run_id, RunInputRow.kind, RunInputRow.name, RunInputRow.document)
        .join(Run, Run.id == RunInputRow.run_id)
        .where(
            Run.procedure == procedure,
            Run.procedure_version == version,
            RunInputRow.kind.in_(sorted(TEXT_KINDS)),
        )
        .order_by(RunInputRow.run_id)
    ).all()
    entries: dict[int, list[tuple[str, str, str]]] = defaultdict(list)
    for run_id, kind, name, document in rows:  # a document's key is the SHA-256 of its text
        entries[run_id].append((kind, name, document))
    found: dict[str, int] = {}
    for run_id, of_run in entries.items():
        found.setdefault(manifest_digest(of_run), run_id)
    return found


def step_labels(conn: Connection, run_id: int) -> dict[int, dict[str, Any]]:
    """Step id -> its labels with their types restored (int, float, bool, text)."""
    found: dict[int, dict[str, Any]] = defaultdict(dict)
    rows = conn.execute(
        select(StepLabel.step_id, StepLabel.name, StepLabel.type, StepLabel.number, StepLabel.text)
        .where(StepLabel.run_id == run_id)
        .order_by(StepLabel.id)
    )
    for step_id, name, type_, number, text in rows:
        found[step_id][name] = label_value(type_, number, text)
    return found
