"""Creating and upgrading the schema with the alembic revisions shipped in ``migrations/``.

``ensure_schema`` runs on every ``Store.open``: a database at the head revision costs one query; an
empty or older one is upgraded inside one transaction that holds the write lock (SQLite ``BEGIN
IMMEDIATE``, PostgreSQL an advisory lock), so benches opening a new database at the same moment
migrate it once.  A database stamped with a revision this version does not know was written by a newer
benchwright and is refused.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from functools import cache
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Connection, Engine, text

from sequencer.errors import StoreError
from sequencer.store.connect import writer

SCRIPT_LOCATION = Path(__file__).with_name("migrations")
PG_MIGRATION_LOCK = 0x62656E6368  # "bench": key of the advisory lock held while migrating


def _config(connection: Connection | None = None) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(SCRIPT_LOCATION).replace("%", "%%"))
    cfg.set_main_option("path_separator", "os")
    if connection is not None:
        cfg.attributes["connection"] = connection
    return cfg


@cache
def _scripts() -> ScriptDirectory:
    return ScriptDirectory.from_config(_config())


def head_revision() -> str:
    """The newest revision this version of benchwright ships."""
    head = _scripts().get_current_head()
    assert head is not None
    return head


def known_revisions() -> frozenset[str]:
    """Every revision shipped in the package."""
    return frozenset(s.revision for s in _scripts().walk_revisions())


def current_revisions(connection: Connection) -> tuple[str, ...]:
    """The revisions the database is stamped with (empty for a new database)."""
    return tuple(MigrationContext.configure(connection).get_current_heads())


def _refuse_newer(current: tuple[str, ...], where: str) -> None:
    unknown = sorted(set(current) - known_revisions())
    if unknown:
        raise StoreError(
            f"the database {where} has schema revision {', '.join(unknown)}, newer than this "
            f"benchwright knows (up to {head_revision()}): upgrade benchwright to use it"
        )


UPGRADE_COMMAND = "benchwright upgrade"


def refuse_old_schema(current: tuple[str, ...], where: str) -> None:
    """For a read-only opening: a schema other than the head revision is refused, never upgraded.

    Newer: upgrade benchwright.  Older: the one command that carries the database forward (a write,
    which a read-only command must not make behind the operator's back)."""
    _refuse_newer(current, where)
    head = head_revision()
    if current != (head,):
        raise StoreError(
            f"the database {where} has schema revision {', '.join(current) or 'none'}, older than "
            f"this benchwright's {head}: `{UPGRADE_COMMAND} --db URL` carries it forward (back it "
            "up first), then run this command again; read-only commands never change a database"
        )


def _lock(connection: Connection) -> None:
    """Serialise migrations (the SQLite write lock is already held since BEGIN IMMEDIATE)."""
    if connection.dialect.name == "postgresql":
        connection.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": PG_MIGRATION_LOCK})


@contextmanager
def _foreign_keys_off(connection: Connection) -> Iterator[None]:
    """SQLite's procedure for table changes (sqlite.org/lang_altertable.html, "other kinds of table
    schema changes"): foreign keys off outside the transaction, ``foreign_key_check`` before the
    commit, on again after.  Batch mode rebuilds a table by copy, drop and rename; with foreign keys
    on, dropping a table that others reference would fail or cascade."""
    if connection.dialect.name != "sqlite":
        yield
        return
    raw = connection.connection.dbapi_connection
    assert raw is not None
    raw.execute("PRAGMA foreign_keys = OFF")
    try:
        yield
    finally:
        raw.execute("PRAGMA foreign_keys = ON")


def _check_foreign_keys(connection: Connection) -> None:
    if connection.dialect.name == "sqlite":
        broken = connection.exec_driver_sql("PRAGMA foreign_key_check").all()
        if broken:
            raise StoreError(
                f"migration would break {len(broken)} references, e.g. {tuple(broken[0])}"
            )


def upgrade_to(engine: Engine, revision: str = "head") -> None:
    """Upgrade the schema to ``revision`` (one transaction, under the migration lock)."""
    where = engine.url.render_as_string(hide_password=True)
    with (
        writer(engine).connect() as connection,
        _foreign_keys_off(connection),
        connection.begin(),
    ):
        _lock(connection)
        current = current_revisions(connection)
        _refuse_newer(current, where)
        target = head_revision() if revision == "head" else revision
        if current != (target,):
            command.upgrade(_config(connection), revision)
            _check_foreign_keys(connection)


def ensure_schema(engine: Engine) -> None:
    """Create or upgrade the schema to the head revision; refuse a database from a newer version."""
    where = engine.url.render_as_string(hide_password=True)
    with engine.connect() as connection:
        current = current_revisions(connection)
    _refuse_newer(current, where)
    if current != (head_revision(),):
        upgrade_to(engine)


def upgrade_database(url: str) -> tuple[tuple[str, ...], str]:
    """Carry the existing benchwright database at ``url`` forward to the head revision.

    Returns (revisions before, revision now).  A missing database, or one without benchwright's
    tables, is refused (``no database at URL``): this command never creates one.
    """
    from sequencer.store.connect import database_exists, open_engine

    if not database_exists(url):
        raise StoreError(f"no database at {url}")
    engine = open_engine(url)
    try:
        with engine.connect() as connection:
            before = current_revisions(connection)
        if not before:
            raise StoreError(f"no database at {url} (no benchwright tables there)")
        ensure_schema(engine)
        return before, head_revision()
    finally:
        engine.dispose()
