"""Commands that read the results store only: certificates, their verification, trends and the
batch report.  Plotting and PDF libraries are imported inside the commands."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import click

from sequencer.cli_common import (
    EXIT_FAIL,
    EXIT_INPUT,
    db_option,
    env,
    existing_run,
    fail,
    handles_errors,
    open_existing_store,
)


@click.command()
@db_option
@click.option("--run", "run_id", type=int, required=True, help="Run to certify.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), required=True, help="Folder for the certificates.")
@click.option("--paper", type=click.Choice(["A4", "Letter"]), default="A4", show_default=True)
@click.option("--partial", is_flag=True, help="Certify the channels a run that did not complete measured.")
@handles_errors
def certify(db: str | None, run_id: int, out_dir: str, paper: str, partial: bool) -> None:
    """One certificate per channel (PDF and HTML) for a run."""
    from sequencer.cli_progress import counting
    from sequencer.reports import certify_run

    with open_existing_store(db) as store:
        run = existing_run(store, run_id)
        if run.status != "completed" and not partial:
            fail(EXIT_INPUT, _not_completed(run_id, run.status, run.reason))
        with counting(f"certificates of run {run_id}") as progress:
            paths = certify_run(store, run_id, Path(out_dir), paper=paper, on_progress=progress)
    pdfs = [p for p in paths if p.suffix == ".pdf"]
    if not pdfs:
        fail(EXIT_INPUT, f"error: run {run_id} ({run.status}) has no measurement: nothing to certify")
    click.echo(f"{len(pdfs)} certificate(s) (PDF and HTML) in {out_dir}")
    for p in pdfs:
        click.echo(f"  {p.name}")


def _not_completed(run_id: int, status: str, reason: str) -> str:
    why = f" ({reason})" if reason else ""
    return (f"error: run {run_id} is {status}{why}: nothing to certify, a certificate covers a "
            f"completed run; `benchwright resume {run_id}` finishes it, or --partial certifies the "
            "channels it measured")


@click.command()
@db_option
@click.argument("certificate", type=click.Path(dir_okay=False, exists=True))
@handles_errors
def verify(db: str | None, certificate: str) -> None:
    """Check a certificate (PDF or HTML) against the database; exit 1 if anything differs."""
    from sequencer.reports import verify_certificate
    from sequencer.store.light_records import open_records
    from sequencer.store.sqlite_files import default_url

    # an SQLite file is read with the standard library (no SQLAlchemy, alembic); anything else
    # (PostgreSQL, an older schema, a damaged file) through the Store, as the listings do
    with open_records(db or default_url(env())) as store:
        result = verify_certificate(store, Path(certificate))
    if result.ok:
        click.echo(f"{certificate}: matches the database (certificate {result.number}, data sha256 {result.data_sha256[:12]})")
        return
    click.echo(f"{certificate}: DOES NOT MATCH the database", err=True)
    for diff in result.differences:
        click.echo(f"  {diff}", err=True)
    sys.exit(EXIT_FAIL)


@click.command()
@db_option
@click.option("--board", required=True, help="Board serial.")
@click.option("--quantity", required=True, help="Quantity name, e.g. gain or noise_in_mV.")
@click.option("--channel", type=int, default=None, help="One channel (default: every channel, as small multiples).")
@click.option("--output", default=None, help="Output name (x1, x5, shaped).")
@click.option("--procedure", default=None, help="Only runs of this procedure.")
@click.option("--reference-runs", type=int, default=5, show_default=True, help="Runs that define the control band.")
@click.option("--band", nargs=2, type=float, default=None, metavar="LOW HIGH", help="Give the control band instead.")
@click.option("--out", "out_file", type=click.Path(dir_okay=False), default=None, help="Write the plot (PNG).")
@click.option("--format", "fmt", type=click.Choice(["text", "csv"]), default="text", show_default=True)
@handles_errors
def trend(db: str | None, board: str, quantity: str, channel: int | None, output: str | None,
          procedure: str | None, reference_runs: int, band: tuple[float, float] | None,
          out_file: str | None, fmt: str) -> None:
    """The quantity over past runs of a board, with a control band; warns on drift.

    Without --channel a quantity measured on several channels is shown for all of them: one
    section per channel in the text, small multiples in the PNG."""
    from sequencer.reports import plot_trend, plot_trends, trend_csv, trends
    from sequencer.reports import trend as compute_trend
    from sequencer.reports.trend import series_keys

    kwargs = dict(reference_runs=reference_runs, band=tuple(band) if band else None, procedure=procedure)
    with open_existing_store(db) as store:
        from sequencer.cli_names import refuse_unknown_names
        from sequencer.store.listing import StoreListing

        refuse_unknown_names(StoreListing(store), board=board)  # a typo is not a flat trend
        try:
            keys = [] if channel is not None else series_keys(store, board, quantity, output=output, procedure=procedure)
            if len(keys) > 1:
                results = trends(store, board, quantity, output=output, **kwargs)
            else:
                results = [compute_trend(store, board, quantity, channel=channel, output=output, **kwargs)]
        except ValueError as exc:
            fail(EXIT_INPUT, f"error: {exc}")
    several = len(results) > 1
    if fmt == "csv":
        click.echo(_trends_csv(results, trend_csv) if several else trend_csv(results[0]), nl=False)
    else:
        for result in results:
            _echo_trend(result)
    if out_file:
        path = plot_trends(results, Path(out_file)) if several else plot_trend(results[0], Path(out_file))
        click.echo(f"plot: {path}")
    for result in results:
        if result.warning:
            where = f"{_where(result)}: " if several else ""
            click.echo(f"warning: {where}{result.warning}", err=True)


def _where(result: Any) -> str:
    where = f"channel {result.channel} " if result.channel is not None else ""
    return (where + (f"output {result.output} " if result.output else "")).strip()


def _echo_trend(result: Any) -> None:
    where = _where(result)
    runs = " ".join(str(p.run_id) for p in result.points)
    click.echo(f"{result.quantity} of {result.board} {where + ' ' if where else ''}over {len(result.points)} run(s): {runs}")
    if result.band_low is not None:
        click.echo(f"  control band {result.band_low:.6g} … {result.band_high:.6g} {result.unit} ({result.band_source})")
    for p in result.flagged:
        click.echo(f"  outside the band: run {p.run_id} value {p.value:.6g}")


def _trends_csv(results: list[Any], one: Any) -> str:
    """Several series in one CSV: ``channel,output`` in front of the one-series columns."""
    lines: list[str] = []
    for result in results:
        body = one(result).splitlines()
        if not lines:
            lines.append("channel,output," + body[0])
        prefix = f"{'' if result.channel is None else result.channel},{result.output or ''},"
        lines += [prefix + row for row in body[1:]]
    return "\n".join(lines) + "\n"


@click.command()
@db_option
@click.option("--batch", required=True, help="Batch name.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None, help="Also write PDF and HTML here.")
@handles_errors
def report(db: str | None, batch: str, out_dir: str | None) -> None:
    """Batch summary: yield, distributions, robust outliers, failed channels."""
    from sequencer.reports import batch_report, batch_summary

    with open_existing_store(db) as store:
        check_batch(store, batch)
        click.echo(batch_summary(store, batch).to_text())
        if out_dir:
            for path in batch_report(store, batch, Path(out_dir)):
                click.echo(f"report: {path}")


def check_batch(store: Any, batch: str) -> None:
    """Exit 2 naming the known batches (and a case-insensitive match) when ``batch`` has no run."""
    from sequencer.store.overview import batch_lines

    with store.engine.connect() as conn:
        known = [b.batch for b in batch_lines(conn)]
    if batch in known:
        return
    same = [k for k in known if k.casefold() == batch.casefold()]
    hint = f"; did you mean {same[0]}?" if same else ""
    listed = ", ".join(known) if known else "none (no run was given --batch)"
    fail(EXIT_INPUT, f"error: no batch {batch!r} in the database{hint}\nknown batches: {listed}")


COMMANDS: list[click.Command] = [certify, verify, trend, report]
