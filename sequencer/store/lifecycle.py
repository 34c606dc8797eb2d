"""A run's life in the database: created, finished, marked interrupted, reopened, annotated.

Every function takes a connection inside a write transaction (the caller commits).  A run's status
columns are the only stored values that ever change, never once the run is completed, and every change
also appends an annotation (the audit trail) in the same transaction.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import Connection, func, insert, select, update
from sqlalchemy.dialects import postgresql, sqlite

from sequencer.errors import StoreError
from sequencer.events import RunInfo
from sequencer.store import lease
from sequencer.store.liveness import Gone, ProcessIdentity, recorder_gone
from sequencer.store.models import Annotation, Document, Instrument, Run, Step
from sequencer.store.models import RunInput as RunInputRow

SYSTEM_AUTHOR = "benchwright"
FINAL_STATUSES = ("completed", "aborted", "interrupted")


def _store_document(conn: Connection, text: str) -> str:
    """Insert ``text`` once (keyed by the SHA-256 of its UTF-8 bytes); return the key."""
    key = hashlib.sha256(text.encode("utf-8")).hexdigest()
    dialect = postgresql if conn.dialect.name == "postgresql" else sqlite
    conn.execute(dialect.insert(Document).values(sha256=key, text=text).on_conflict_do_nothing())
    return key


def annotate(
    conn: Connection,
    run_id: int,
    *,
    kind: str,
    text: str,
    author: str = SYSTEM_AUTHOR,
    detail: Mapping[str, Any] | None = None,
    at: datetime | None = None,
) -> None:
    """Append a note or an audit entry to a run."""
    conn.execute(
        insert(Annotation).values(
            run_id=run_id,
            at=at or datetime.now(UTC),
            kind=kind,
            author=author,
            text=text,
            detail=dict(detail or {}),
        )
    )


def insert_run(
    conn: Connection, info: RunInfo, started_at: datetime, me: ProcessIdentity, token: str = ""
) -> int:
    """A new run in status ``running`` under the lease ``token`` (a new one if empty), with its
    documents and instruments; returns its id."""
    procedure_doc = _store_document(conn, info.procedure_text)
    bench_doc = _store_document(conn, info.bench_text) if info.bench_text else None
    result = conn.execute(
        insert(Run).values(
            procedure=info.procedure,
            procedure_version=info.procedure_version,
            procedure_sha256=info.procedure_sha256,
            procedure_path=info.procedure_path,
            procedure_doc=procedure_doc,
            bench=info.bench,
            bench_doc=bench_doc,
            board=info.board,
            board_type=info.board_type,
            batch=info.batch,
            operator=info.operator,
            software_version=info.software_version,
            parameters=dict(info.parameters),
            repeat_of=info.repeat_of,
            status="running",
            reason="",
            started_at=started_at,
            ended_at=None,
            host=me.host,
            pid=me.pid,
            process_tag=me.tag,
            lease_token=token or lease.new_token(),
            heartbeat_at=started_at,
        )
    )
    run_id = int(result.inserted_primary_key[0])
    if info.inputs:
        conn.execute(
            insert(RunInputRow),
            [
                {"run_id": run_id, "kind": i.kind, "name": i.name, "document": _store_document(conn, i.text)}
                for i in info.inputs
            ],
        )
    for caveat in info.caveats:
        annotate(conn, run_id, kind="caveat", text=caveat, at=started_at)
    if info.instruments:
        conn.execute(
            insert(Instrument),
            [
                {
                    "run_id": run_id,
                    "role": i.role,
                    "address": i.address,
                    "maker": i.maker,
                    "model": i.model,
                    "serial": i.serial,
                    "firmware": i.firmware,
                    "calibration_due": i.calibration_due,
                    "calibrated": i.calibrated,
                }
                for i in info.instruments
            ],
        )
    return run_id


def _locked_run(conn: Connection, run_id: int) -> Any:
    row = conn.execute(
        select(
            Run.status, Run.host, Run.pid, Run.process_tag, Run.ended_at, Run.reason,
            Run.started_at, Run.heartbeat_at, Run.lease_token,
        )
        .where(Run.id == run_id)
        .with_for_update()
    ).first()
    if row is None:
        raise StoreError(f"no run {run_id} in the database")
    return row


def _refuse_completed(run_id: int, status: str) -> None:
    if status == "completed":
        raise StoreError(f"run {run_id} is completed and is never modified: repeat it as a new run")


def finish_run(
    conn: Connection,
    run_id: int,
    status: str,
    at: datetime,
    reason: str,
    *,
    token: str | None = None,
) -> bool:
    """End a running run as completed, aborted or interrupted, with its reason; True when written.

    ``token``: the lease the caller holds.  When the run is held under another token (taken over by
    ``resume --take-over`` or ``safe --take-over``), nothing of the run is changed: the caller's
    status is noted beside it (``lease_lost``) and False is returned.
    """
    if status not in FINAL_STATUSES:
        raise StoreError(
            f"a run cannot finish as {status!r}: use one of {', '.join(FINAL_STATUSES)}"
        )
    row = _locked_run(conn, run_id)
    if token is not None and row.lease_token != token:
        text = (
            f"a process that had lost this run's lease ended it as {status}; not written over "
            f"the run, which is {row.status} under another process"
        )
        detail = {"status": status, "reason": reason, "run_status": row.status}
        annotate(conn, run_id, kind="lease_lost", text=text, detail=detail, at=at)
        return False
    _refuse_completed(run_id, row.status)
    if row.status != "running":
        raise StoreError(
            f"run {run_id} is {row.status}, not running: reopen it before finishing it"
        )
    conn.execute(
        update(Run).where(Run.id == run_id).values(status=status, ended_at=at, reason=reason)
    )
    detail = {"from": row.status, "to": status, "reason": reason}
    annotate(conn, run_id, kind="finished", text=f"run {status}", detail=detail, at=at)
    return True


def reopen_run(
    conn: Connection,
    run_id: int,
    me: ProcessIdentity,
    at: datetime,
    *,
    token: str = "",
    take_over: bool = False,
    stale_after_s: float = lease.DEFAULT_STALE_AFTER_S,
) -> None:
    """Set an aborted, interrupted or stale running run back to running under a new lease.

    A running run whose recorder looks live (``lease.judge``) is refused unless ``take_over``
    (the operator knows that PC is dead): the take-over is recorded in the audit trail.
    """
    row = _locked_run(conn, run_id)
    _refuse_completed(run_id, row.status)
    seen = lease.judge(row, me, at, stale_after_s) if row.status == "running" else None
    if seen is not None and seen.state == "live" and not take_over:
        raise StoreError(
            f"run {run_id} is still running: {seen.why}; it can be resumed once that process "
            "has ended, or with --take-over if you know its PC is dead"
        )
    conn.execute(
        update(Run)
        .where(Run.id == run_id)
        .values(
            status="running", ended_at=None, reason="", host=me.host, pid=me.pid,
            process_tag=me.tag, lease_token=token or lease.new_token(), heartbeat_at=at,
        )
    )
    detail = {"from": row.status, "previous_host": row.host, "previous_pid": row.pid}
    detail |= {"previous_ended_at": row.ended_at, "previous_reason": row.reason}
    detail |= {"host": me.host, "pid": me.pid, "previous_heartbeat_at": row.heartbeat_at}
    if seen is not None and seen.state == "live":
        detail |= {"taken_over": True, "seen": seen.why}
        text = f"taken over from {row.host} (pid {row.pid}) with --take-over: {seen.why}"
        annotate(conn, run_id, kind="resumed", text=text, detail=detail, at=at)
        return
    annotate(conn, run_id, kind="resumed", text=f"resumed from {row.status}", detail=detail, at=at)


def _running_rows(conn: Connection, *, lock: bool) -> list[Any]:
    last_step = (
        select(func.max(Step.finished_at)).where(Step.run_id == Run.id).scalar_subquery()
    )
    query = select(
        Run.id, Run.host, Run.pid, Run.process_tag, Run.started_at, Run.heartbeat_at,
        last_step.label("last_step_at"),
    ).where(Run.status == "running")
    return list(conn.execute(query.with_for_update() if lock else query).all())


def gone_recorders(
    conn: Connection,
    me: ProcessIdentity,
    at: datetime,
    stale_after_s: float = lease.DEFAULT_STALE_AFTER_S,
) -> dict[int, Gone]:
    """The running runs whose recorder is gone, by id, as ``mark_stale`` would judge them --
    read only (for listings, which must not write)."""
    rows = _running_rows(conn, lock=False)
    return {g.run_id: g for r in rows if (g := recorder_gone(r, me, at, stale_after_s)) is not None}


def mark_stale(
    conn: Connection,
    me: ProcessIdentity,
    at: datetime,
    stale_after_s: float = lease.DEFAULT_STALE_AFTER_S,
) -> list[int]:
    """Mark ``interrupted`` every running run whose recorder is gone (``lease.judge``): its process
    ended (this host, this boot) or its heartbeat is older than ``stale_after_s`` (anywhere).

    Its ``ended_at`` is the last moment known: its last finished step, heartbeat or start.
    """
    rows = _running_rows(conn, lock=True)
    gone = [g for r in rows if (g := recorder_gone(r, me, at, stale_after_s)) is not None]
    by_id = {r.id: r for r in rows}
    for g in gone:
        r = by_id[g.run_id]
        conn.execute(
            update(Run)
            .where(Run.id == g.run_id)
            .values(status="interrupted", ended_at=g.ended_at, reason=g.reason)
        )
        detail = {"from": "running", "to": "interrupted", "pid": r.pid, "host": r.host}
        annotate(conn, g.run_id, kind="interrupted", text=g.reason, detail=detail, at=at)
    return [g.run_id for g in gone]
