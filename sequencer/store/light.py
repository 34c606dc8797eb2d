"""The light read path: an SQLite results database read through the standard library's ``sqlite3``.

Why: a command that only lists or exports (``runs``, ``batches``, ``export`` as CSV/JSON) spends
most of its start-up importing SQLAlchemy (~0.5 s on a loaded 2-core machine), alembic for the schema
check (~0.25 s) and numpy, for a few SELECTs.  Here the schema check is one query -- the revision
stamped in ``alembic_version`` must equal ``HEAD_REVISION`` (a test compares it with alembic's own
head) -- and the queries are the same ones ``overview`` and ``export`` build with SQLAlchemy, written
out.  Results are the same dataclasses and dicts (a test compares both paths on one database).

Anything unusual is left to the SQLAlchemy path, which knows what to say about it: a URL with
options, PostgreSQL, a file on a network filesystem, a database at another revision (to upgrade or
refuse), no schema, a damaged or locked file. ``open`` returns None for those.  The connection is
opened ``mode=rw`` (never creates a file) with ``PRAGMA query_only`` (never writes); a file that
cannot be written (a read-only mount) through ``sqlite_files.read_only_uri``.
"""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime
from pathlib import Path
from types import SimpleNamespace, TracebackType
from typing import Any, Self
from urllib.parse import quote

from sequencer.errors import StoreError
from sequencer.store.lines import LINE_COLUMNS, BatchLine, RunCounts, RunLine
from sequencer.store.rows import EXPORT_COLUMNS, iso_utc
from sequencer.store.sqlite_files import (
    DEFAULT_BUSY_TIMEOUT_S,
    network_filesystem,
    read_only_location,
    read_only_uri,
)

#: As ``liveness.DEFAULT_STALE_AFTER_S`` (a test checks); ``liveness`` (socket, /proc) is imported
#: only when there is a running run to judge.
DEFAULT_STALE_AFTER_S = 60.0
#: The newest schema revision (``migrations/versions``); a test checks it against alembic's head.
HEAD_REVISION = "0008"

_PREFIX = "sqlite:///"
_STORED = "%Y-%m-%d %H:%M:%S.%f"  # how SQLAlchemy's SQLite DateTime writes a (naive UTC) moment


def sqlite_file(url: str) -> str | None:
    """The file named by a plain ``sqlite:///PATH`` URL; None for any other URL (PostgreSQL, memory,
    ``file:`` URIs, query options, percent-escapes): those take the SQLAlchemy path."""
    if not url.startswith(_PREFIX):
        return None
    path = url[len(_PREFIX):]
    if not path or path == ":memory:" or path.startswith("file:") or any(c in path for c in "?%#"):
        return None
    return path


def _moment(text: Any) -> datetime | None:
    """A stored moment (naive UTC text) as an aware UTC datetime."""
    if text is None:
        return None
    when = text if isinstance(text, datetime) else datetime.fromisoformat(str(text))
    return when.replace(tzinfo=UTC) if when.tzinfo is None else when.astimezone(UTC)


def _stored(when: datetime) -> str:
    if when.tzinfo is None or when.utcoffset() is None:
        raise ValueError(f"naive datetime {when.isoformat()}: pass an aware datetime (UTC)")
    return when.astimezone(UTC).strftime(_STORED)


def _run_where(
    *,
    run_id: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    status: str | None = None,
    batch: str | None = None,
    operator: str | None = None,
) -> tuple[str, dict[str, Any]]:
    """The WHERE text on ``runs`` and its parameters (``queries.run_filters``' filters)."""
    clauses, params = [], {}
    for column, value in (("id", run_id), ("board", board), ("procedure", procedure),
                          ("status", status), ("batch", batch), ("operator", operator)):  # fmt: skip
        if value is not None:
            clauses.append(f"runs.{column} = :{column}")
            params[column] = value
    if since is not None:
        clauses.append("runs.started_at >= :since")
        params["since"] = _stored(since)
    if until is not None:
        clauses.append("runs.started_at < :until")
        params["until"] = _stored(until)
    return (" WHERE " + " AND ".join(clauses)) if clauses else "", params


class LightReader:
    """Listings and the measurement export of an SQLite store at ``HEAD_REVISION``."""

    def __init__(self, conn: sqlite3.Connection) -> None:
        self._conn = conn

    @classmethod
    def open(cls, url: str) -> LightReader | None:
        """The reader for ``url``, or None where the SQLAlchemy path must answer (module docstring).
        A plain SQLite URL whose file is missing is ``StoreError`` at once (nothing is created)."""
        path = sqlite_file(url)
        if path is None:
            return None
        file = Path(path)
        if not file.is_file():
            raise StoreError(f"no database at {url}")
        try:
            mounts = Path("/proc/mounts").read_text()
        except OSError:
            mounts = ""
        if network_filesystem(file, mounts):
            return None
        try:
            uri = (read_only_uri(file) if read_only_location(file)  # a read-only mount
                   else f"file:{quote(str(file.resolve()))}?mode=rw")
            conn = sqlite3.connect(uri, uri=True, timeout=DEFAULT_BUSY_TIMEOUT_S)
        except sqlite3.Error:
            return None
        try:
            conn.execute("PRAGMA query_only = ON")
            revisions = [r[0] for r in conn.execute("SELECT version_num FROM alembic_version")]
        except sqlite3.Error:
            revisions = []
        if revisions != [HEAD_REVISION]:
            conn.close()
            return None
        return cls(conn)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.close()

    def _rows(self, sql: str, params: Any = ()) -> list[tuple[Any, ...]]:
        try:
            return self._conn.execute(sql, params).fetchall()
        except sqlite3.Error as exc:
            raise StoreError(f"cannot read the results database: {exc}") from exc

    def gone_recorders(self, stale_after_s: float = DEFAULT_STALE_AFTER_S) -> dict[int, Any]:
        """The running runs whose recorder is gone, by id (``liveness.recorder_gone``, as
        ``lifecycle.gone_recorders`` asks): shown as interrupted, never written here."""
        rows = self._rows(
            "SELECT id, host, pid, process_tag, started_at, heartbeat_at, (SELECT max(finished_at) "
            "FROM steps WHERE steps.run_id = runs.id) FROM runs WHERE status = 'running'"
        )
        if not rows:
            return {}
        from sequencer.store.liveness import recorder_gone, this_process

        me, now, gone = this_process(), datetime.now(UTC), {}
        for run_id, host, pid, tag, started, beat, last_step in rows:
            row = SimpleNamespace(id=run_id, host=host, pid=pid, process_tag=tag or "",
                                  started_at=_moment(started), heartbeat_at=_moment(beat),
                                  last_step_at=_moment(last_step))  # fmt: skip
            seen = recorder_gone(row, me, now, stale_after_s)
            if seen is not None:
                gone[run_id] = seen
        return gone

    def run_lines(self, *, newest_first: bool = True, **filters: Any) -> list[RunLine]:
        """As ``overview.run_lines`` (filters of ``queries.run_filters`` and ``operator``)."""
        where, params = _run_where(**filters)
        order = "DESC" if newest_first else "ASC"
        sql = (f"SELECT {', '.join(LINE_COLUMNS)} FROM runs{where} "
               f"ORDER BY started_at {order}, id {order}")  # fmt: skip
        out = []
        for row in self._rows(sql, params):
            *head, started, ended = row
            out.append(RunLine(*head, _moment(started), _moment(ended)))
        return out

    def run_counts(self, run_ids: list[int]) -> dict[int, RunCounts]:
        """As ``overview.run_counts(..., steps=False)``: measurements and values outside limits."""
        ids = list(dict.fromkeys(int(i) for i in run_ids))
        if not ids:
            return {}
        measured: dict[int, tuple[int, int]] = {}
        for start in range(0, len(ids), 500):  # SQLite's bound-parameter limit
            part = ids[start:start + 500]
            marks = ", ".join("?" * len(part))
            for run_id, n, failed in self._rows(
                "SELECT run_id, count(id), sum(CASE WHEN verdict = 'fail' THEN 1 ELSE 0 END) "
                f"FROM measurements WHERE run_id IN ({marks}) GROUP BY run_id", part
            ):
                measured[run_id] = (int(n), int(failed or 0))
        return {
            i: RunCounts(run_id=i, measurements=measured.get(i, (0, 0))[0],
                         failed=measured.get(i, (0, 0))[1])
            for i in ids
        }

    def batch_lines(self) -> list[BatchLine]:
        """As ``overview.batch_lines``: every named batch, most recently started first."""
        rows = self._rows(
            "SELECT batch, count(id), count(DISTINCT board), "
            "sum(CASE WHEN status = 'running' THEN 1 ELSE 0 END), min(started_at), max(started_at) "
            "FROM runs WHERE batch != '' GROUP BY batch ORDER BY max(started_at) DESC"
        )
        return [
            BatchLine(batch=r[0], runs=int(r[1]), boards=int(r[2]), running=int(r[3] or 0),
                      first_started=_moment(r[4]), last_started=_moment(r[5]))  # type: ignore[arg-type]
            for r in rows
        ]

    def export_rows(self, **filters: Any) -> list[dict[str, Any]]:
        """As ``export.export_rows``: measurements keyed by ``EXPORT_COLUMNS``, by run, in the
        order they were recorded."""
        where, params = _run_where(**filters)
        runs = {
            r[0]: (r[0], iso_utc(_moment(r[1])), *r[2:])
            for r in self._rows(
                "SELECT id, started_at, procedure, procedure_version, procedure_sha256, bench, board "
                f"FROM runs{where}", params
            )
        }
        measured = ("m.run_id, m.channel, m.output, m.aggressor, m.quantity, m.value, "
                    "m.uncertainty, m.unit, m.low, m.high, m.verdict, m.qualifier, m.reason")  # fmt: skip
        if set(params) == {"id"}:
            sql = f"SELECT {measured} FROM measurements m WHERE m.run_id = :id"
        elif params:
            sql = f"SELECT {measured} FROM measurements m JOIN runs ON runs.id = m.run_id{where}"
        else:
            sql = f"SELECT {measured} FROM measurements m"
        rows = self._rows(sql + " ORDER BY m.run_id, m.id", params)
        return [dict(zip(EXPORT_COLUMNS, runs[m[0]] + m[1:], strict=True)) for m in rows]
