"""Results for analysts: runs, measurements, series and traces as pandas DataFrames.

One line loads a batch::

    from sequencer import results
    df = results.measurements("sqlite:///benchwright-demo/results.db", batch="NR-2026-W14")

Every function takes the database URL (an SQLAlchemy URL, as ``--db``) and the run filters ``run``,
``board``, ``procedure``, ``batch``, ``since``, ``until``; the columns are those of
``benchwright export --what ...`` (``sequencer.results.tables``).  Needs the ``data`` extra
(pandas, pyarrow): ``pip install 'benchwright[data]'``.

A CSV export read back with pandas: CSV has no types, and ``pandas.read_csv`` guesses a number in
any field that looks like one, quoted or not, so a version ``1.0`` would come back as the float 1.0
(and ``1.10`` as 1.1).  Give it the text columns::

    pandas.read_csv("m.csv", dtype=results.csv_dtypes("measurements"))
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sequencer.results.tables import COLUMNS_OF, WHATS, Selection, Table, read_table

__all__ = [
    "WHATS",
    "Selection",
    "Table",
    "csv_dtypes",
    "measurements",
    "read_table",
    "runs",
    "series",
    "traces",
]


def csv_dtypes(what: str = "measurements") -> dict[str, str]:
    """``dtype=`` for ``pandas.read_csv`` of an export: every text column (versions, serials, step
    paths) as pandas' ``string``, so that ``1.0`` stays the text it was written as."""
    if what not in COLUMNS_OF:
        raise ValueError(f"unknown table {what!r}: one of {', '.join(COLUMNS_OF)}")
    return {c.name: "string" for c in COLUMNS_OF[what] if c.kind == "str"}


def _frame(
    what: str,
    db: str,
    *,
    run: int | None,
    board: str | None,
    procedure: str | None,
    batch: str | None,
    since: datetime | None,
    until: datetime | None,
) -> Any:
    from sequencer.results.formats import to_frame
    from sequencer.store import Store

    sel = Selection(
        run_id=run, board=board, procedure=procedure, batch=batch, since=since, until=until
    )
    with Store.open(db, create=False) as store:
        return to_frame(read_table(store, what, sel))


def runs(
    db: str,
    *,
    run: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    batch: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> Any:
    """One row per run: provenance, status, verdict and counts (``pandas.DataFrame``)."""
    return _frame("runs", db, run=run, board=board, procedure=procedure, batch=batch,
                  since=since, until=until)  # fmt: skip


def measurements(
    db: str,
    *,
    run: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    batch: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> Any:
    """One row per judged value, the DESIGN.md export columns (``pandas.DataFrame``)."""
    return _frame("measurements", db, run=run, board=board, procedure=procedure, batch=batch,
                  since=since, until=until)  # fmt: skip


def series(
    db: str,
    *,
    run: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    batch: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> Any:
    """One row per transfer-curve / S-curve point (``pandas.DataFrame``)."""
    return _frame("series", db, run=run, board=board, procedure=procedure, batch=batch,
                  since=since, until=until)  # fmt: skip


def traces(
    db: str,
    *,
    run: int | None = None,
    board: str | None = None,
    procedure: str | None = None,
    batch: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
) -> Any:
    """One row per stored trace; ``samples_V`` holds a float64 array per row (``pandas.DataFrame``)."""
    return _frame("traces", db, run=run, board=board, procedure=procedure, batch=batch,
                  since=since, until=until)  # fmt: skip
