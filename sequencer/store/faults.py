"""Storage faults: the disk or the database file failed, as opposed to a wrong request.

A full disk, an I/O error or a damaged database file is not bad input (exit 2): the run cannot be
recorded and stops (exit 3, DESIGN.md), with one line naming the cause.  The database drivers say
which it was: SQLite's extended result codes (``sqlite3.Error.sqlite_errorname``, Python >= 3.11;
https://www.sqlite.org/rescode.html) and PostgreSQL's SQLSTATE classes (53 insufficient resources,
58 system error; https://www.postgresql.org/docs/current/errcodes-appendix.html).
"""

from __future__ import annotations

from sqlalchemy import Connection

from sequencer.errors import StorageFault, StoreError

#: SQLite primary result code -> what to tell the operator.
_SQLITE = {
    "SQLITE_FULL": "the disk (or the database's size limit) is full",
    "SQLITE_IOERR": "the disk reported an I/O error",
    "SQLITE_CORRUPT": "the database file is damaged (restore it from a backup; SQLite's "
    "'.recover' command can save what is readable)",
    "SQLITE_NOTADB": "the file is not an SQLite database (or its first page is damaged)",
    "SQLITE_CANTOPEN": "the database file cannot be opened",
}
#: PostgreSQL SQLSTATE class -> what to tell the operator.
_POSTGRES = {
    "53": "the database server ran out of a resource (disk, memory or connections)",
    "58": "the database server reported a system (I/O) error",
    "XX": "the database server reported internal damage (data corrupted)",
}


def storage_cause(exc: BaseException) -> str:
    """What failed in the storage under ``exc`` (a driver or SQLAlchemy error), or ``""``."""
    seen: set[int] = set()
    item: BaseException | None = exc
    while item is not None and id(item) not in seen:
        seen.add(id(item))
        name = getattr(item, "sqlite_errorname", "") or ""
        primary = "_".join(name.split("_")[:2])  # SQLITE_IOERR_WRITE -> SQLITE_IOERR
        if primary in _SQLITE:
            return _SQLITE[primary]
        sqlstate = getattr(item, "sqlstate", None)
        if isinstance(sqlstate, str) and sqlstate[:2] in _POSTGRES:
            return _POSTGRES[sqlstate[:2]]
        if isinstance(item, OSError) and item.errno is not None:
            from errno import EDQUOT, EIO, ENOSPC, EROFS

            causes = {ENOSPC: "the disk is full", EDQUOT: "the disk quota is exceeded",
                      EIO: "the disk reported an I/O error", EROFS: "the disk is read-only"}  # fmt: skip
            if item.errno in causes:
                return causes[item.errno]
        item = getattr(item, "orig", None) or item.__cause__ or item.__context__
    return ""


def first_line(exc: BaseException) -> str:
    """The driver's own first line of ``exc`` (SQLAlchemy's SQL and links left out)."""
    orig = getattr(exc, "orig", None) or exc
    text = str(orig).strip()
    return text.splitlines()[0] if text else type(orig).__name__


def as_store_error(what: str, exc: BaseException) -> StoreError:
    """``exc`` as the one line the CLI prints: a :class:`StorageFault` when the storage failed."""
    cause = storage_cause(exc)
    if cause:
        return StorageFault(f"{what}: {cause} ({first_line(exc)})")
    return StoreError(f"{what}: {first_line(exc)}")


def refuse_damaged(conn: Connection, where: str) -> None:
    """Raise :class:`StorageFault` when an SQLite file that shows no schema is in fact damaged.

    Called only when no schema revision was found: a damaged page can hide the tables, and
    "no database" would send the operator looking in the wrong place.  ``PRAGMA quick_check``
    (https://www.sqlite.org/pragma.html#pragma_quick_check) reads every page once.
    """
    if conn.dialect.name != "sqlite":
        return
    verdict = conn.exec_driver_sql("PRAGMA quick_check(1)").scalar()
    if verdict != "ok":
        raise StorageFault(f"the database {where} is damaged ({verdict}); {_SQLITE['SQLITE_CORRUPT']}")
