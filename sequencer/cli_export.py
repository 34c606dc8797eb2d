"""``benchwright export``: runs, measurements, series or traces in CSV, JSON, Parquet or ROOT.

CSV and JSON go to stdout (or ``--out``); Parquet and ROOT are files and need ``--out``.  The
measurement columns are DESIGN.md's, in order; the other tables are described in
``sequencer.results.tables``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from sequencer.cli_common import (
    EXIT_INPUT,
    db_option,
    fail,
    handles_errors,
    open_existing_store,
    open_listing,
)

FORMATS = ("csv", "json", "parquet", "root")
BINARY = ("parquet", "root")


def _utc(moment: Any) -> Any:
    """A naive command-line date-time, read as UTC (the store keeps UTC)."""
    import datetime as dt

    return None if moment is None else moment.replace(tzinfo=dt.UTC)


def _text(store: Any, what: str, fmt: str, sel: Any) -> str:
    from sequencer.results.tables import read_table
    from sequencer.store import format_rows

    if what == "traces" and fmt == "csv":
        fail(EXIT_INPUT, "error: traces carry a sample array per row: use --format json, parquet or root")
    table = read_table(store, what, sel)
    rows = [
        {k: (v.tolist() if hasattr(v, "tolist") else v) for k, v in row.items()} for row in table.rows
    ]
    return format_rows(rows, fmt, table.names)


@click.command()
@db_option
@click.option("--what", "whats", type=click.Choice(["measurements", "series", "traces", "runs"]),
              multiple=True, default=("measurements",), show_default=True,
              help="Judged values; curve points (transfer, S-curve, mean pulse); captured traces; or "
                   "runs. Repeat it with --format root for several trees in one file.")
@click.option("--run", "run_id", type=int, default=None)
@click.option("--board", default=None)
@click.option("--procedure", default=None)
@click.option("--batch", default=None, help="Only the runs of this batch.")
@click.option("--since", type=click.DateTime(), default=None, help="Runs started at or after (UTC).")
@click.option("--until", type=click.DateTime(), default=None, help="Runs started before (UTC).")
@click.option("--format", "fmt", type=click.Choice(FORMATS), default="csv", show_default=True)
@click.option("--out", "out_file", type=click.Path(dir_okay=False), default=None,
              help="Write to this file (needed for parquet and root; else stdout).")
@handles_errors
def export(db: str | None, whats: tuple[str, ...], run_id: int | None, board: str | None,
           procedure: str | None, batch: str | None, since: Any, until: Any, fmt: str,
           out_file: str | None) -> None:
    """Results in open formats: one row per value (or curve point, trace, run) with its keys."""
    if fmt in BINARY and not out_file:
        raise click.UsageError(f"--format {fmt} writes a file: give --out FILE")
    whats = tuple(dict.fromkeys(whats))
    if len(whats) > 1 and fmt != "root":
        raise click.UsageError("several --what tables go into one file only with --format root")
    what = whats[0]
    if what == "measurements" and fmt not in BINARY:  # the fixed export: the light path can read it
        from sequencer.store.rows import EXPORT_COLUMNS, format_rows

        with open_listing(db) as listing:
            rows = listing.export_rows(run_id=run_id, board=board, procedure=procedure, batch=batch,
                                       since=_utc(since), until=_utc(until))
            if not rows:  # a name no run carries is a typo, not an empty export
                from sequencer.cli_names import refuse_unknown_names

                refuse_unknown_names(listing, batch=batch, board=board)
        _emit(format_rows(rows, fmt, EXPORT_COLUMNS), out_file)  # type: ignore[arg-type]
        return
    from sequencer.results.tables import Selection, read_table

    sel = Selection(run_id=run_id, board=board, procedure=procedure, batch=batch,
                    since=_utc(since), until=_utc(until))
    with open_existing_store(db) as store:
        from sequencer.cli_names import refuse_unknown_names
        from sequencer.store.listing import StoreListing

        if batch is not None or board is not None:
            refuse_unknown_names(StoreListing(store), batch=batch, board=board)
        if fmt in BINARY:
            from sequencer.results.formats import write_parquet, write_root

            tables = [read_table(store, w, sel) for w in whats]
            path = Path(out_file or "")
            if fmt == "parquet":
                write_parquet(tables[0], path)
            else:
                write_root(tables, path)
            for table in tables:
                click.echo(f"{len(table.rows)} {table.name} row(s) written to {path}", err=True)
            return
        text = _text(store, what, fmt, sel)
    _emit(text, out_file)


def _emit(text: str, out_file: str | None) -> None:
    if out_file:
        Path(out_file).write_text(text, encoding="utf-8")
    else:
        click.echo(text, nl=False)
