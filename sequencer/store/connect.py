"""Opening the results database: the URL, the engine and the per-connection settings.

SQLite gets, on every connection (a ``connect`` event listener): a busy timeout (other benches may hold
the write lock), ``foreign_keys=ON``, ``journal_mode=WAL`` (readers never block the writer) and
``synchronous=FULL`` (a committed step survives a power loss, not only a crash).  Write transactions
start with ``BEGIN IMMEDIATE`` so that two writers queue on the busy timeout instead of failing with
"database is locked" when a read lock cannot be upgraded.  WAL needs shared memory between the
processes, so a file on a network filesystem is refused (use PostgreSQL there).

PostgreSQL goes through ``postgresql+psycopg://`` (the ``postgres`` extra, imported lazily).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import Engine, create_engine, event, make_url
from sqlalchemy.engine import URL
from sqlalchemy.exc import ArgumentError, NoSuchModuleError

from sequencer.errors import StoreError
from sequencer.store.sqlite_files import (
    DEFAULT_BUSY_TIMEOUT_S,
    DEFAULT_URL,
    NETWORK_FILESYSTEMS,
    default_url,
    network_filesystem,
    read_only_location,
    read_only_uri,
)

DEFAULT_CONNECT_TIMEOUT_S = 10  # PostgreSQL: an unreachable server fails in seconds, not minutes
WRITE_OPTION = "benchwright_write"

__all__ = ["DEFAULT_BUSY_TIMEOUT_S", "DEFAULT_URL", "NETWORK_FILESYSTEMS", "database_exists",
           "default_url", "dump_json", "is_read_only", "network_filesystem", "open_engine", "parse_url",
           "writer"]


def parse_url(url: str) -> URL:
    """Parse and check an SQLAlchemy URL; only SQLite and PostgreSQL (psycopg 3) are supported."""
    try:
        parsed = make_url(url)
    except ArgumentError as exc:
        raise StoreError(f"not a database URL: {url!r}") from exc
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        return parsed
    if backend == "postgresql":
        if parsed.get_driver_name() != "psycopg":
            raise StoreError(
                f"use postgresql+psycopg:// for PostgreSQL, not {parsed.drivername}://"
            )
        return parsed
    raise StoreError(
        f"unsupported database {parsed.drivername!r}: use sqlite:/// or postgresql+psycopg://"
    )


def _check_sqlite_file(url: URL) -> None:
    database = url.database or ""
    if database in ("", ":memory:") or database.startswith("file:"):
        return
    path = Path(database)
    if not path.parent.exists():
        raise StoreError(f"cannot open {database}: folder {path.parent} does not exist")
    mounts = Path("/proc/mounts")
    if mounts.exists():
        fs = network_filesystem(path, mounts.read_text())
        if fs:
            raise StoreError(
                f"{database} is on a network filesystem ({fs}); SQLite WAL does not work there, "
                "use a local file or PostgreSQL (postgresql+psycopg://)"
            )


def _json_default(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, datetime | date):
        return value.isoformat()
    raise TypeError(f"{type(value).__name__} is not JSON-serialisable")


def dump_json(value: Any) -> str:
    """JSON for the JSON columns: numpy scalars/arrays and datetimes converted; NaN/inf as null."""
    return json.dumps(_finite(value), default=_json_default, allow_nan=False)


def _finite(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Mapping):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def _sqlite_engine(
    url: URL, busy_timeout_s: float, *, read_only: bool = False, wait_for_disk: bool = True
) -> Engine:
    _check_sqlite_file(url)
    if read_only:  # a file: URI that only reads (sqlite_files.read_only_uri)
        url = url.set(database=read_only_uri(Path(url.database or "")), query={"uri": "true"})
    engine = create_engine(url, json_serializer=dump_json)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = (
            None  # the driver stays out of the way; we emit BEGIN ourselves
        )
        cur = dbapi_conn.cursor()
        cur.execute(f"PRAGMA busy_timeout = {int(busy_timeout_s * 1000)}")
        cur.execute("PRAGMA foreign_keys = ON")
        if read_only:
            cur.execute("PRAGMA query_only = ON")
        else:
            cur.execute("PRAGMA journal_mode = WAL")
            # FULL: a commit returns once the disk has it (fsync); NORMAL (WAL): survives a crash
            # of the program, may lose the last commits on a power cut (https://www.sqlite.org/
            # pragma.html#pragma_synchronous) -- only for a throwaway database (the demo)
            cur.execute(f"PRAGMA synchronous = {'FULL' if wait_for_disk else 'NORMAL'}")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        write = conn.get_execution_options().get(WRITE_OPTION, False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


def _postgres_engine(url: URL) -> Engine:
    try:
        import psycopg  # noqa: F401  (lazy: the postgres extra)
    except ImportError as exc:
        raise StoreError(
            "PostgreSQL needs the psycopg driver: pip install 'benchwright[postgres]'"
        ) from exc
    connect_args = (
        {} if "connect_timeout" in url.query else {"connect_timeout": DEFAULT_CONNECT_TIMEOUT_S}
    )
    try:
        return create_engine(
            url, json_serializer=dump_json, pool_pre_ping=True, connect_args=connect_args
        )
    except NoSuchModuleError as exc:
        raise StoreError(f"cannot load the driver for {url.drivername}") from exc


def open_engine(
    url: str,
    *,
    busy_timeout_s: float = DEFAULT_BUSY_TIMEOUT_S,
    reader: bool = False,
    wait_for_disk: bool = True,
) -> Engine:
    """An engine for ``url`` with benchwright's connection settings (see the module docstring).

    ``reader``: the caller only reads.  An SQLite file that cannot be written (a read-only mount)
    is then opened through a read-only URI instead of failing on the ``-shm`` file SQLite cannot
    create beside it; ``is_read_only(engine)`` tells.  ``wait_for_disk=False``: SQLite commits
    without waiting for the disk (``synchronous=NORMAL``; the demo's throwaway database)."""
    parsed = parse_url(url)
    if parsed.get_backend_name() == "sqlite":
        database = parsed.database or ""
        plain_file = database not in ("", ":memory:") and not database.startswith("file:")
        read_only = reader and plain_file and read_only_location(Path(database))
        return _sqlite_engine(
            parsed, busy_timeout_s, read_only=read_only, wait_for_disk=wait_for_disk
        )
    return _postgres_engine(parsed)


def is_read_only(engine: Engine) -> bool:
    """True for an engine ``open_engine`` opened read-only (a database on a read-only mount)."""
    database = engine.url.database or ""
    return engine.url.get_backend_name() == "sqlite" and database.startswith("file:") and (
        "mode=ro" in database
    )


def database_exists(url: str) -> bool:
    """Whether ``url`` names a database that is already there, without creating anything.

    SQLite: the file exists (an in-memory database never does).  PostgreSQL: the server answers (the
    database itself must exist to connect); whether it holds benchwright's tables is the schema's
    question (``migrate.current_revisions``).
    """
    parsed = parse_url(url)
    if parsed.get_backend_name() != "sqlite":
        return True
    database = parsed.database or ""
    if database in ("", ":memory:") or database.startswith("file:"):
        return False
    return Path(database).is_file()


def writer(engine: Engine) -> Engine:
    """The same engine, but its transactions take the write lock at BEGIN (SQLite)."""
    return engine.execution_options(**{WRITE_OPTION: True})
