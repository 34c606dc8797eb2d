"""``benchwright run``, ``resume``, ``instruments`` and ``sim``: what opens a bench or serves a
simulated one (attached lazily by ``cli.py``, so a command that only reads the store does not pay
for defining them)."""

from __future__ import annotations

import sys
from dataclasses import replace
from functools import partial
from pathlib import Path
from typing import Any

import click

from sequencer.cli_common import (
    EXIT_ABORT,
    EXIT_FAIL,
    EXIT_OK,
    SAFETY_HELP,
    db_option,
    env,
    handles_errors,
    login_name,
    visa_library_option,
)
from sequencer.cli_terminal import acknowledge_on_terminal, prompt_on_terminal
from sequencer.errors import StoreError

override_option = click.option(
    "--override-instrument-checks", is_flag=True,
    help="Run although an instrument is past its calibration date or answers with another identity "
         "than the bench file expects; recorded and printed on every certificate of the run.",
)


def _summarise(run_id: int, outcome: Any) -> int:
    for warning in getattr(outcome, "warnings", ()):
        click.echo(f"warning: run {run_id}: {warning}", err=True)
    verdict = "PASS" if outcome.failed == 0 else f"FAIL ({outcome.failed} value(s) outside limits)"
    click.echo(f"run {run_id} completed: {outcome.measurements} measurement(s), {verdict}")
    return EXIT_OK if outcome.failed == 0 else EXIT_FAIL




@click.command(epilog=SAFETY_HELP)
@click.argument("procedure", type=click.Path(dir_okay=False), required=False)
@click.option("--bench", "bench_path", type=click.Path(dir_okay=False), help="Bench file (roles → instruments).")
@click.option("--sim", "sim_board", type=click.Path(dir_okay=False), help="Start a simulated bench for this board file.")
@click.option("--board", "serial", default=None, help="Serial of the board under test (default with --sim: the board file's).")
@db_option
@click.option("--operator", default=login_name, show_default="your login name", help="Operator name recorded with the run.")
@click.option("--yes", is_flag=True, help="Unattended: acknowledge the safety caution (recorded as such).")
@click.option("--repeat", "repeat", type=int, default=None, metavar="RUN_ID", help="Rerun the procedure text stored for that run.")
@click.option("--board-type", default=None,
              help="Board type of this board (default: the procedure's); its limits judge the run. "
                   "A lab's own types: 'lab: DIR' in the bench file or BENCHWRIGHT_LAB=DIR "
                   "(DIR/boards, DIR/limits; the environment wins).")
@click.option("--log", "log_path", type=click.Path(dir_okay=False), default=None, help="Append a plain-text event log here.")
@click.option("--realtime", is_flag=True,
              help="With --sim: the simulated instruments take the time a real bench would "
                   "(acquisitions, gates, relays, round trips; the board file's timing: section).")
@visa_library_option
@override_option
@handles_errors
def run(procedure: str | None, bench_path: str | None, sim_board: str | None, serial: str | None,
        db: str | None, operator: str, yes: bool, repeat: int | None, board_type: str | None,
        log_path: str | None, realtime: bool, allow_visa_library: tuple[str, ...],
        override_instrument_checks: bool) -> None:
    """Run a procedure on a bench (or the simulator) for one board and record everything."""
    from sequencer import compose, rerun_inputs
    from sequencer.procedure import load_procedure

    if procedure and repeat is not None:
        raise click.UsageError("give PROCEDURE or --repeat RUN_ID, not both: --repeat runs the texts "
                               "stored with that run")
    if repeat is None and not (bench_path or sim_board):
        raise click.UsageError(compose.MISSING_BENCH)
    if realtime and not sim_board:
        raise click.UsageError("--realtime paces a simulated bench: give --sim BOARD.yaml")
    warn = lambda line: click.echo(f"warning: {line}", err=True)  # noqa: E731
    opener = compose.open_store if repeat is None else partial(compose.open_existing_store, upgrade=True)
    with opener(db, env()) as store:
        record = compose.check_store(store, repeat) if repeat is not None else None
        stored = store.run_inputs(repeat) if repeat is not None else ()
        lab = compose.lab_for(env(), bench_path, allowed_visa_libraries=allow_visa_library)
        if lab.warning():
            warn(lab.warning())
        if record is not None:
            proc = rerun_inputs.stored_procedure(record, stored, warn)
        elif procedure:
            proc = load_procedure(procedure, lab_dir=lab.folder)
        else:
            raise click.UsageError("give PROCEDURE or --repeat RUN_ID")
        if serial is None and sim_board:
            serial, _ = compose.sim_board_serial(sim_board)
        if serial is None and record is not None:
            serial = record.board
        if not serial:
            raise click.UsageError("give --board SERIAL")
        plan_ = compose.plan_for(proc, serial, board_type=board_type, stored=stored, lab=lab)
        if sim_board:
            compose.check_sim_board(plan_, sim_board)
        request = compose.RunRequest(
            operator=operator, unattended=yes, acknowledge=acknowledge_on_terminal(),
            prompt=prompt_on_terminal(), repeat_of=repeat, progress=True,
            log_path=Path(log_path) if log_path else None,
            previous_instruments=tuple(record.instruments) if record is not None else (),
            warn=warn, override_instrument_checks=override_instrument_checks,
        )
        if record is not None and not (bench_path or sim_board):
            bench_cm = compose.recorded_bench(record.id, record.bench_text, allowed_visa_libraries=allow_visa_library,
                                              dialects=rerun_inputs.stored_dialects(stored))
        else:
            bench_cm = compose.bench_for(bench_path, sim_board, allowed_visa_libraries=allow_visa_library,
                                         realtime=realtime, report=click.echo)
        with bench_cm as spec:
            if record is not None:
                spec = rerun_inputs.rerun_dialects(spec, record, stored, warn)
            result = compose.execute(plan_, spec, store, request)
    sys.exit(_summarise(result.run_id, result.outcome))


@click.command(epilog=SAFETY_HELP)
@click.argument("run_id", type=int)
@db_option
@click.option("--bench", "bench_path", type=click.Path(dir_okay=False), help="Another bench file.")
@click.option("--sim", "sim_board", type=click.Path(dir_okay=False), help="Continue on a simulated bench.")
@click.option("--operator", default=login_name, show_default="your login name", help="Operator name recorded with the run.")
@click.option("--yes", is_flag=True, help="Unattended: acknowledge the safety caution.")
@click.option("--allow-other-bench", is_flag=True,
              help="Resume on another bench than the run's own (recorded; certificates state it).")
@click.option("--allow-other-board", is_flag=True,
              help="Resume with --sim of another board than the run's (recorded; certificates state it).")
@click.option("--take-over", is_flag=True,
              help="Take over a run whose recorder still looks alive (its PC is dead; recorded).")
@visa_library_option
@override_option
@handles_errors
def resume(run_id: int, db: str | None, bench_path: str | None, sim_board: str | None,
           operator: str, yes: bool, allow_other_bench: bool, allow_other_board: bool,
           take_over: bool, allow_visa_library: tuple[str, ...],
           override_instrument_checks: bool) -> None:
    """Continue an interrupted or aborted run from its last completed step."""
    from sequencer import compose, rerun_inputs

    with compose.open_existing_store(db, env(), upgrade=True) as store:
        store.mark_stale_runs_interrupted()
        record = compose.check_store(store, run_id)
        if record.status == "completed":
            raise StoreError(f"run {run_id} is completed; a completed run is never resumed (use run --repeat)")
        stored = store.run_inputs(run_id)
        proc = rerun_inputs.stored_procedure(record, stored, lambda line: click.echo(f"warning: {line}", err=True))
        plan_ = compose.plan_for(proc, record.board, board_type=record.board_type or None, stored=stored,
                                 lab=compose.lab_for(env(), bench_path,
                                                     allowed_visa_libraries=allow_visa_library))
        request = compose.RunRequest(operator=operator or record.operator, unattended=yes,
                                     acknowledge=acknowledge_on_terminal(), prompt=prompt_on_terminal(),
                                     override_instrument_checks=override_instrument_checks,
                                     warn=lambda line: click.echo(f"warning: {line}", err=True),
                                     take_over=take_over)
        if bench_path or sim_board:
            bench_cm = compose.bench_for(bench_path, sim_board, allowed_visa_libraries=allow_visa_library,
                                         report=click.echo)
        else:
            bench_cm = compose.recorded_bench(run_id, record.bench_text, allowed_visa_libraries=allow_visa_library,
                                              dialects=rerun_inputs.stored_dialects(stored))
        with bench_cm as spec:
            spec = rerun_inputs.rerun_dialects(spec, record, stored, lambda line: click.echo(f"warning: {line}", err=True))
            from sequencer.resume_checks import check_resume_target

            serial = compose.sim_board_serial(sim_board)[0] if sim_board else None
            if bench_path or sim_board:  # the recorded bench is the run's own by definition
                caveats = check_resume_target(record, spec, sim_board, serial, other_bench=allow_other_bench,
                                              other_board=allow_other_board)
                request = replace(request, resume_caveats=caveats)
            result = compose.execute(plan_, spec, store, request, resume_run=run_id)
    sys.exit(_summarise(result.run_id, result.outcome))


# -- instruments and the simulator ----------------------------------------------------------------


@click.command()
@click.option("--bench", "bench_path", required=True, type=click.Path(dir_okay=False))
@click.option("--check", is_flag=True, help="Ask every query of each dialect; print each reply as parsed.")
@visa_library_option
@handles_errors
def instruments(bench_path: str, check: bool, allow_visa_library: tuple[str, ...]) -> None:
    """Identify each instrument; warn on identity mismatch or calibration past due."""
    import datetime as dt

    from drivers.bench import load_bench
    from drivers.instruments import describe_bench, format_reports

    spec = load_bench(bench_path, allowed_visa_libraries=allow_visa_library)
    if check:
        from drivers.check import check_bench

        lines = check_bench(spec)
        click.echo("\n".join(lines))
        if any(" ERROR " in line or " FAILED: " in line for line in lines):
            sys.exit(EXIT_ABORT)
        return
    reports = describe_bench(spec, dt.date.today())
    click.echo("\n".join(format_reports(reports)))
    if any(getattr(r, "error", "") for r in reports):
        sys.exit(EXIT_ABORT)


@click.command()
@click.option("--board", "board_path", required=True, type=click.Path(dir_okay=False))
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port-base", default=0, type=int, help="First TCP port (0 = free ports).")
@click.option("--bench-out", type=click.Path(dir_okay=False), default=None, help="Write the bench file here.")
@click.option("--link", type=click.Choice(["socket", "hislip", "vxi11"]), default="socket",
              show_default=True,
              help="Addresses in the bench file: raw sockets, HiSLIP or VXI-11 (all are served).")
@click.option("--realtime", is_flag=True,
              help="The instruments take the time a real bench would (the board file's timing:).")
@handles_errors
def sim(board_path: str, host: str, port_base: int, bench_out: str | None, link: str,
        realtime: bool) -> None:
    """Serve the simulated instruments of a board file until interrupted."""
    from drivers.sim import serve

    serve(board_path, host=host, port_base=port_base, bench_out=Path(bench_out) if bench_out else None,
          on_ready=None, link=link, realtime=realtime)


# name -> "module:attribute"; each module is imported only when its command runs (or for --help)
