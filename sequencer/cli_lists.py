"""``benchwright runs`` and ``benchwright batches``: what the database holds, one line each
(attached to the command group by ``cli.py``)."""

from __future__ import annotations

from typing import Any

import click

from sequencer.cli_common import db_option, handles_errors, open_listing

FORMATS = ["table", "csv", "json"]
BATCH_COLUMNS = ("batch", "boards", "runs", "running", "passed", "failed", "first", "last")


def _utc(moment: Any) -> Any:
    """A naive command-line date-time, read as UTC (the store keeps UTC)."""
    import datetime as dt

    return None if moment is None else moment.replace(tzinfo=dt.UTC)


@click.command()
@db_option
@click.option("--format", "fmt", type=click.Choice(FORMATS), default="table", show_default=True)
@click.option("--board", default=None)
@click.option("--procedure", default=None)
@click.option("--batch", default=None)
@click.option("--operator", default=None)
@click.option("--status", type=click.Choice(["running", "completed", "aborted", "interrupted"]), default=None)
@click.option("--verdict", type=click.Choice(["pass", "fail", "open"]), default=None,
              help="open: not judged yet (no value out of limits, run not completed).")
@click.option("--since", type=click.DateTime(), default=None, help="Runs started at or after (UTC).")
@click.option("--until", type=click.DateTime(), default=None, help="Runs started before (UTC).")
@handles_errors
def runs(db: str | None, fmt: str, board: str | None, procedure: str | None, batch: str | None,
         operator: str | None, status: str | None, verdict: str | None, since: Any, until: Any) -> None:
    """Past runs: id, procedure, board, status, start, end, verdict, operator, batch."""
    from sequencer.cli_names import refuse_unknown_names
    from sequencer.store.lines import as_seen
    from sequencer.store.rows import RUN_COLUMNS, format_rows, run_rows

    # read only: a running run whose recorder is gone is shown interrupted, stored by the writers
    # (resume, batch); so a status filter is applied after that judgement
    stored_status = status if status in ("completed", "aborted") else None
    with open_listing(db) as listing:
        lines = listing.run_lines(newest_first=False, board=board, procedure=procedure, batch=batch,
                                  operator=operator, status=stored_status, since=_utc(since), until=_utc(until))  # fmt: skip
        gone = listing.gone_recorders() if any(r.status == "running" for r in lines) else {}
        lines = [as_seen(r, gone) for r in lines]
        if status is not None:
            lines = [r for r in lines if r.status.split(" ")[0] == status]
        if not lines:  # a name no run carries is a typo, not an empty answer
            refuse_unknown_names(listing, batch=batch, board=board)
        counts = listing.run_counts([r.id for r in lines])
    verdicts = {r.id: counts[r.id].verdict(r.status) for r in lines}
    if verdict is not None:
        wanted = "" if verdict == "open" else verdict
        lines = [r for r in lines if verdicts[r.id] == wanted]
    click.echo(format_rows(run_rows(lines, verdicts), fmt, RUN_COLUMNS), nl=False)
    for r in lines:
        if r.id in gone:
            click.echo(f"note: run {r.id} is stored as running but {gone[r.id].reason}; shown as "
                       f"{r.status} (`benchwright resume {r.id}` records it)", err=True)
    note = maybe_live_note(lines)
    if note:
        click.echo(note, err=True)


def maybe_live_note(lines: Any) -> str:
    """A line (on stderr) naming the runs whose bench may have been left live -- interrupted (a
    killed runner, a dead PC) or aborted without a confirmed safe state -- and ``benchwright
    safe``; '' when there are none."""
    ids = [r.id for r in lines
           if r.status.startswith("interrupted") or (r.status == "aborted" and "UNSAFE" in (r.reason or ""))]
    if not ids:
        return ""
    listed = ", ".join(str(i) for i in ids[:10]) + (" ..." if len(ids) > 10 else "")
    return (f"note: run(s) {listed} ended without a confirmed safe state; a bias supply on their "
            "bench may still be live: `benchwright instruments --bench FILE` shows it, "
            "`benchwright safe --bench FILE` ramps it down and switches it off")


@click.command()
@db_option
@click.option("--format", "fmt", type=click.Choice(FORMATS), default="table", show_default=True)
@handles_errors
def batches(db: str | None, fmt: str) -> None:
    """Batches in the database: boards, runs, how many pass or fail, first and last run."""
    from sequencer.store.lines import as_seen
    from sequencer.store.rows import format_rows, iso_utc

    rows = []
    with open_listing(db) as listing:
        batch_lines = listing.batch_lines()
        # as ``runs``: a run stored as running whose recorder is gone is judged at read time
        # (shown interrupted, nothing written), so it is not counted as running
        gone = listing.gone_recorders() if any(b.running for b in batch_lines) else {}
        for b in batch_lines:
            lines = listing.run_lines(batch=b.batch)
            lines = [as_seen(r, gone) for r in lines]
            counts = listing.run_counts([r.id for r in lines])
            verdicts = [counts[r.id].verdict(r.status) for r in lines]
            running = sum(r.status == "running" for r in lines)
            rows.append({
                "batch": b.batch, "boards": b.boards, "runs": b.runs, "running": running,
                "passed": verdicts.count("pass"), "failed": verdicts.count("fail"),
                "first": iso_utc(b.first_started), "last": iso_utc(b.last_started),
            })  # fmt: skip
    click.echo(format_rows(rows, fmt, BATCH_COLUMNS), nl=False)
