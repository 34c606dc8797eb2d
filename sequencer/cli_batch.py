"""The ``batch`` and ``demo`` commands (attached to the command group by ``cli.py``)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import click

from sequencer.cli_common import (
    EXIT_OK,
    SAFETY_HELP,
    db_option,
    env,
    handles_errors,
    login_name,
    visa_library_option,
)


def _mount_on_terminal(bench: bool) -> Any:
    """Ask the operator to mount the next board: Enter = go, s = skip, q = stop the batch."""

    def ask(board: Any, index: int, count: int) -> str:
        where = "on the bench" if bench else "(simulated)"
        click.echo(
            f"\nBoard {index}/{count}: mount {board.serial} ({board.board_type}) {where}.", err=True
        )
        answer = click.prompt(
            "Enter to start, s to skip it, q to stop the batch",
            default="",
            show_default=False,
            err=True,
        )
        return {"s": "skip", "q": "stop"}.get(answer.strip().lower()[:1], "go")

    return ask


@click.command(epilog=SAFETY_HELP)
@click.argument("batch_file", type=click.Path(dir_okay=False))
@click.option(
    "--bench",
    "bench_path",
    type=click.Path(dir_okay=False),
    help="Bench file (every board on this bench).",
)
@click.option(
    "--sim-dir",
    type=click.Path(file_okay=False),
    help="Simulated boards: DIR/<serial>.yaml (or the entry's sim_board).",
)
@click.option(
    "--yes",
    is_flag=True,
    help="Unattended: no mount prompts, the safety caution acknowledged (recorded).",
)
@click.option(
    "--requalify",
    is_flag=True,
    help="Qualify boards again that already have a completed run in this batch.",
)
@click.option(
    "--outlier-sigma",
    type=float,
    default=None,
    help="Robust outlier cut in robust sigma (default 3.5).",
)
@click.option(
    "--report-dir",
    type=click.Path(file_okay=False),
    default=None,
    help="Also write the batch report (PDF, HTML) here.",
)
@db_option
@visa_library_option
@click.option(
    "--override-instrument-checks",
    is_flag=True,
    help="Run although an instrument is past its calibration date or has another identity than "
    "expected; recorded and printed on every certificate of each run.",
)
@handles_errors
def batch(
    batch_file: str,
    bench_path: str | None,
    sim_dir: str | None,
    yes: bool,
    requalify: bool,
    outlier_sigma: float | None,
    report_dir: str | None,
    db: str | None,
    allow_visa_library: tuple[str, ...],
    override_instrument_checks: bool,
) -> None:
    """Qualify the boards of a batch file in turn; a running yield, then the batch summary."""
    from sequencer import compose
    from sequencer.batchrun import BatchOptions, qualify_batch, summary_text
    from sequencer.cli_terminal import acknowledge_on_terminal, prompt_on_terminal
    from sequencer.procedure import load_batch

    spec = load_batch(batch_file)
    terminal = sys.stdin.isatty()
    if bench_path and not yes and not terminal:
        raise click.UsageError("a bench batch needs a terminal to prompt for each board, or --yes")
    lab = compose.lab_for(env(), bench_path, allowed_visa_libraries=allow_visa_library)
    if lab.warning():
        click.echo(f"warning: {lab.warning()}", err=True)
    options = BatchOptions(
        bench_path=bench_path,
        allowed_visa_libraries=allow_visa_library,
        sim_dir=sim_dir,
        unattended=yes,
        requalify=requalify,
        progress=True,
        mount=_mount_on_terminal(bool(bench_path)) if terminal else None,
        acknowledge=acknowledge_on_terminal(),
        prompt=prompt_on_terminal(),
        echo=click.echo,
        lab=lab,
        override_instrument_checks=override_instrument_checks,
        default_operator=login_name(),
    )
    with compose.open_store(db, env()) as store:
        outcome = qualify_batch(spec, store, options)
        click.echo("")
        click.echo(summary_text(store, spec.name, outlier_sigma=outlier_sigma))
        if report_dir:
            from sequencer.reports import batch_report

            kwargs = {} if outlier_sigma is None else {"outlier_sigma": outlier_sigma}
            for path in batch_report(store, spec.name, report_dir, **kwargs):
                click.echo(f"batch report: {path}")
    if outcome.refused:
        left = [b.serial for b in outcome.boards if b.status == "not run"]
        click.echo(f"batch {spec.name}: refused mid-way, {len(left)} board(s) not run "
                   f"({', '.join(left)}):", err=True)
        for problem in outcome.refused:
            click.echo(f"  {problem}", err=True)
    sys.exit(outcome.exit_code())


@click.command()
@click.option(
    "--out",
    "out_dir",
    type=click.Path(file_okay=False),
    default="benchwright-demo",
    show_default=True,
    help="Folder for the database, certificates and summary.",
)
@handles_errors
def demo(out_dir: str) -> None:
    """Qualify invented batches on the simulator, end to end: preamp boards, scintillator modules,
    a coincidence unit and a fast digitizer.

    One board has a dead channel, one a saturating channel and one high crosstalk; a module has a
    sensor off, another a poor fibre; the coincidence unit resolves too wide and the digitizer has
    a missing code: the demo shows them failing, and exits 0 all the same (it is a demonstration).
    """
    from sequencer.demo import run_demo
    from sequencer.demo.scenario import describe

    result = run_demo(Path(out_dir), echo=click.echo)
    click.echo("")
    for line in describe(result):
        click.echo(line)
    sys.exit(EXIT_OK)


COMMANDS = [batch, demo]
