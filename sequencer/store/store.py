"""``Store``: the results database of benchwright, opened from an SQLAlchemy URL.

It records runs (``create_run`` then the runner's events through ``handle`` / ``subscriber``, see
``recording.py``), answers the queries of reports, trends and resume, and keeps results append-only:
a completed run is never modified; notes and status changes are audited additions.
Every database failure leaves it as a ``StoreError`` with one clear line.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from types import TracebackType
from typing import Any, Self

from sqlalchemy import Connection, Engine
from sqlalchemy.exc import SQLAlchemyError

from drivers.trace import Trace
from sequencer.errors import StoreError
from sequencer.events import Event, RunInfo
from sequencer.inputs import RunInput
from sequencer.records import Measurement, StepResult
from sequencer.store import bench_lease, lease, lifecycle, queries
from sequencer.store.behind import WriteBehind
from sequencer.store.connect import (
    DEFAULT_BUSY_TIMEOUT_S,
    database_exists,
    is_read_only,
    open_engine,
    writer,
)
from sequencer.store.faults import as_store_error, refuse_damaged
from sequencer.store.liveness import this_process
from sequencer.store.migrate import current_revisions, ensure_schema, refuse_old_schema
from sequencer.store.recording import Recorder
from sequencer.store.records import (
    Annotation,
    RunRecord,
    SafetyRecord,
    SeriesPoint,
    StepRecord,
)


@contextmanager
def _as_store_error(what: str) -> Iterator[None]:
    try:
        yield
    except SQLAlchemyError as exc:
        raise as_store_error(what, exc) from exc


class _Synchronous:
    """``Store.writing_behind`` where no thread may write: the store's ``handle`` as it is."""

    def __init__(self, handle: Callable[[Event], None]) -> None:
        self.handle = handle

    def __call__(self, event: Event) -> None:
        self.handle(event)

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        return None

    def close(self, *, raise_failure: bool = True) -> None:
        return None


class Store:
    """The results database.  Open with ``Store.open(url)``; close with ``close()`` or ``with``."""

    def __init__(self, engine: Engine) -> None:
        """Wrap an engine whose schema is at head (``Store.open`` makes sure of that)."""
        self.engine = engine
        #: Opened read-only (an SQLite file on a read-only mount, for a command that only reads).
        self.read_only = is_read_only(engine)
        self._writer = writer(engine)
        self._recorder = Recorder(engine)

    @classmethod
    def open(
        cls,
        url: str,
        *,
        create: bool = True,
        upgrade: bool | None = None,
        busy_timeout_s: float = DEFAULT_BUSY_TIMEOUT_S,
        wait_for_disk: bool = True,
    ) -> Store:
        """Connect, create or upgrade the schema; ``StoreError`` if unreachable or newer.

        ``create=False`` refuses, with ``no database at URL``, a database that is not there or holds
        no benchwright schema, and creates no file on the way.  ``upgrade`` (default: ``create``)
        says whether an older schema may be carried forward on the way in: the read-only commands
        (``runs``, ``export``, ``verify``, ``certify``, ...) leave it False, so opening never writes;
        an older database is then refused with the command that upgrades it.  ``run --repeat`` and
        ``resume`` write into an existing database and pass ``upgrade=True``.  ``busy_timeout_s``
        (SQLite): how long a statement waits for another writer's lock (``safe`` waits briefly).
        A reader's SQLite file that cannot be written (a read-only mount) is opened read-only
        (``read_only``), instead of failing on the index file SQLite cannot create beside it.

        ``wait_for_disk=False`` (SQLite only; the demo's throwaway database): a commit does not wait
        for the disk, so a power cut may lose the last steps (a crash of the program does not).
        Every step's commit otherwise costs an fsync, ~5 ms on a virtual machine's disk.
        """
        if not create and not database_exists(url):
            raise StoreError(f"no database at {url}")
        may_upgrade = create if upgrade is None else upgrade
        reader = not create and not may_upgrade
        engine = open_engine(
            url, busy_timeout_s=busy_timeout_s, reader=reader, wait_for_disk=wait_for_disk
        )
        where = engine.url.render_as_string(hide_password=True)
        try:
            with _as_store_error(f"cannot open the results database {where}"):
                if not create:
                    with engine.connect() as conn:
                        current = current_revisions(conn)
                        if not current:
                            refuse_damaged(conn, where)
                            raise StoreError(f"no database at {url} (no benchwright tables there)")
                if may_upgrade:
                    ensure_schema(engine)
                else:
                    refuse_old_schema(current, where)
        except BaseException:
            engine.dispose()
            raise
        return cls(engine)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    @contextmanager
    def _read(self, what: str) -> Iterator[Connection]:
        with _as_store_error(what), self.engine.connect() as conn:
            yield conn

    @contextmanager
    def _write(self, what: str) -> Iterator[Connection]:
        with _as_store_error(what), self._writer.begin() as conn:
            yield conn

    # -- recording ---------------------------------------------------------------------------
    def create_run(self, info: RunInfo, started_at: datetime, *, lease_token: str = "") -> int:
        """A new run in status ``running`` (this host, pid and the lease token); returns its id."""
        token = lease_token or lease.new_token()
        with self._write(f"cannot record run of {info.procedure} on {info.board}") as conn:
            run_id = lifecycle.insert_run(conn, info, started_at, this_process(), token)
        self._recorder.hold(run_id, token)
        return run_id

    def handle(self, event: Event) -> None:
        """Record one of the runner's events (see ``recording.py`` for what is written when)."""
        try:
            self._recorder.handle(event)
        except (SQLAlchemyError, ValueError) as exc:  # message built only on failure: a hot path
            path = getattr(event, "path", "")
            where = f" step {path}" if path else ""
            what = f"cannot record {type(event).__name__} of run {event.run_id}{where}"
            raise as_store_error(what, exc) from exc

    @property
    def subscriber(self) -> Callable[[Event], None]:
        """``handle``, to subscribe to the runner's events."""
        return self.handle

    def writing_behind(self) -> WriteBehind | _Synchronous:
        """A subscriber that records the run one step behind, on a writer thread (``behind.py``);
        use it as a context manager (its exit writes what is queued).  An in-memory SQLite
        database is one connection per thread, so it is recorded synchronously instead."""
        database = self.engine.url.database or ""
        if self.engine.url.get_backend_name() == "sqlite" and database in ("", ":memory:"):
            return _Synchronous(self.handle)
        return WriteBehind(self.handle)

    def reopen_run(self, run_id: int, *, lease_token: str = "", take_over: bool = False) -> None:
        """Set an aborted/interrupted (or dead-recorder running) run to running under a new
        lease, audited; ``take_over`` also a running run whose recorder looks live."""
        token = lease_token or lease.new_token()
        with self._write(f"cannot reopen run {run_id}") as conn:
            lifecycle.reopen_run(
                conn, run_id, this_process(), datetime.now(UTC),
                token=token, take_over=take_over,
            )
        self._recorder.hold(run_id, token)

    def mark_stale_runs_interrupted(
        self, *, stale_after_s: float = lease.DEFAULT_STALE_AFTER_S
    ) -> list[int]:
        """Running runs whose recorder is gone (its process ended on this host and boot, or no
        heartbeat for ``stale_after_s`` from anywhere) become ``interrupted``; their ids."""
        with self._write("cannot check for interrupted runs") as conn:
            return lifecycle.mark_stale(conn, this_process(), datetime.now(UTC), stale_after_s)

    def beat(self, run_id: int, lease_token: str) -> bool:
        """Refresh the heartbeat of a run held under ``lease_token``; False when the lease is lost
        (the run was taken over, or is no longer running)."""
        with self._write(f"cannot refresh the heartbeat of run {run_id}") as conn:
            return lease.beat(conn, run_id, lease_token, datetime.now(UTC))

    def bench_holders(self, bench: str) -> list[bench_lease.BenchHolder]:
        """The runs recorded as running on ``bench``, each judged by its lease (live or not)."""
        with self._read(f"cannot read the runs on bench {bench}") as conn:
            return bench_lease.holders(conn, bench, this_process(), datetime.now(UTC))

    def take_bench(self, holder: bench_lease.BenchHolder) -> None:
        """``safe --take-over``: the run ``holder`` becomes interrupted under a revoked lease,
        audited (``bench_lease.take_over``)."""
        with self._write(f"cannot record the take-over of run {holder.run_id}") as conn:
            bench_lease.take_over(conn, holder, this_process(), datetime.now(UTC))

    def add_note(self, run_id: int, text: str, author: str) -> None:
        """Append an operator's note to a run (any status; notes are additions, never edits)."""
        with self._write(f"cannot add a note to run {run_id}") as conn:
            queries.get_run(conn, run_id)
            lifecycle.annotate(conn, run_id, kind="note", text=text, author=author)

    def add_caveat(self, run_id: int, text: str) -> None:
        """Append a caveat every certificate of the run must print (e.g. an override on resume)."""
        with self._write(f"cannot add a caveat to run {run_id}") as conn:
            queries.get_run(conn, run_id)
            lifecycle.annotate(conn, run_id, kind="caveat", text=text)

    # -- reading -----------------------------------------------------------------------------
    def get_run(self, run_id: int) -> RunRecord:
        with self._read(f"cannot read run {run_id}") as conn:
            return queries.get_run(conn, run_id)

    def list_runs(
        self,
        board: str | None = None,
        procedure: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        status: str | None = None,
        batch: str | None = None,
    ) -> list[RunRecord]:
        """Matching runs, oldest first (``since`` inclusive, ``until`` exclusive, on the start)."""
        filters: dict[str, Any] = dict(board=board, procedure=procedure, since=since, until=until)
        with self._read("cannot list runs") as conn:
            return queries.list_runs(conn, **filters, status=status, batch=batch)

    def runs_of_batch(self, batch: str) -> list[RunRecord]:
        return self.list_runs(batch=batch)

    def latest_qualification(self, board: str, procedure: str | None = None) -> RunRecord | None:
        """The board's most recently started completed run (of ``procedure`` if given)."""
        with self._read(f"cannot read runs of {board}") as conn:
            return queries.latest_run(conn, board=board, procedure=procedure, status="completed")

    def steps(self, run_id: int) -> list[StepRecord]:
        """Every finished step of a run (completed, failed or skipped), in order."""
        with self._read(f"cannot read steps of run {run_id}") as conn:
            return queries.steps(conn, run_id)

    def completed_steps(self, run_id: int, *, traces: bool = True) -> dict[str, StepResult]:
        """Path -> completed step with settings, results, traces and measurements (for resume);
        ``traces=False``: without the traces (the reports, which print none of them)."""
        with self._read(f"cannot read steps of run {run_id}") as conn:
            return queries.completed_steps(conn, run_id, traces=traces)

    def traces(self, run_id: int, path_prefix: str | None = None) -> list[Trace]:
        with self._read(f"cannot read traces of run {run_id}") as conn:
            return queries.traces(conn, run_id, path_prefix)

    def measurements(
        self,
        run_id: int | None = None,
        board: str | None = None,
        procedure: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> list[Measurement]:
        filters: dict[str, Any] = dict(run_id=run_id, board=board, procedure=procedure)
        with self._read("cannot read measurements") as conn:
            return queries.measurements(conn, **filters, since=since, until=until)

    def quantity_series(
        self,
        board: str,
        quantity: str,
        channel: int | None = None,
        output: str | None = None,
        procedure: str | None = None,
    ) -> list[SeriesPoint]:
        """``quantity`` over the board's completed runs, oldest first (None = every channel/output)."""
        with self._read(f"cannot read {quantity} of {board}") as conn:
            return queries.quantity_series(
                conn,
                board=board,
                quantity=quantity,
                channel=channel,
                output=output,
                procedure=procedure,
            )

    def notes(self, run_id: int) -> list[Annotation]:
        """The operators' notes of a run, oldest first."""
        with self._read(f"cannot read notes of run {run_id}") as conn:
            return queries.annotations(conn, run_id, notes_only=True)

    def audit_trail(self, run_id: int) -> list[Annotation]:
        """Notes and status changes (finished, resumed, interrupted) of a run, oldest first."""
        with self._read(f"cannot read the audit trail of run {run_id}") as conn:
            return queries.annotations(conn, run_id)

    def caveats(self, run_id: int) -> list[str]:
        """What a certificate of the run must say about how it was run (changed text, overrides)."""
        with self._read(f"cannot read the caveats of run {run_id}") as conn:
            return [a.text for a in queries.annotations(conn, run_id) if a.kind == "caveat"]

    def run_inputs(self, run_id: int) -> tuple[RunInput, ...]:
        """Every text the run used (``sequencer.inputs``); empty for runs recorded before 0003."""
        with self._read(f"cannot read the inputs of run {run_id}") as conn:
            queries.get_run(conn, run_id)
            return queries.run_inputs(conn, run_id)

    def text_digests(self, procedure: str, version: str) -> dict[str, int]:
        """Text digest (``sequencer.inputs.text_digest``) -> first run, for a procedure and version."""
        with self._read(f"cannot read the runs of {procedure} {version}") as conn:
            return queries.text_digests(conn, procedure, version)

    def safety_events(self, run_id: int) -> list[SafetyRecord]:
        with self._read(f"cannot read safety events of run {run_id}") as conn:
            return queries.safety_events(conn, run_id)
