"""Command line and composition root of benchwright.

Every command reads its files and the environment once, hands plain values down, and maps the one
exception hierarchy (``drivers.errors``) to the exit codes of DESIGN.md:

0 all measured values within limits · 1 at least one value outside its limits · 2 bad input (file,
option, procedure) · 3 run aborted (instrument fault, interlock, operator, signal).
"""

from __future__ import annotations

import sys
from dataclasses import replace
from functools import partial
from pathlib import Path
from typing import Any

import click

from sequencer import __version__
from sequencer.cli_common import (
    EXIT_ABORT,
    EXIT_FAIL,
    EXIT_INPUT,
    EXIT_OK,
    SAFETY_HELP,
    db_option,
    env,
    fail,
    handles_errors,
    login_name,
    visa_library_option,
)
from sequencer.cli_lazy import LazyGroup
from sequencer.cli_terminal import acknowledge_on_terminal, prompt_on_terminal
from sequencer.errors import StoreError


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="benchwright")
@click.option("--debug", is_flag=True, help="Show tracebacks for errors.")
def cli(debug: bool) -> None:
    """Qualify front-end electronics boards with versioned test procedures."""


# -- procedures ---------------------------------------------------------------------------------


@cli.command()
@click.argument("procedures", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--fragment", is_flag=True,
              help="Check the files as fragments (files for include:); a file whose modeline names "
                   "fragment.schema.json is checked as one anyway.")
@click.option("--board-type", default=None,
              help="Plan fragments for this board type too (a procedure names its own).")
@click.option("--bench", "bench_path", type=click.Path(dir_okay=False), default=None,
              help="Also check each procedure against this bench file: the roles it needs, bias "
                   "voltages, ramp rates and current limits (nothing is opened).")
@handles_errors
def validate(
    procedures: tuple[str, ...], fragment: bool, board_type: str | None, bench_path: str | None
) -> None:
    """Check procedure files; print file:line:column: message per problem (exit 2 if any)."""
    from sequencer.compose import lab_for
    from sequencer.procedure import validate_paths

    lab = lab_for(env(), bench_path)  # the bench file's lab: folder, unless BENCHWRIGHT_LAB is set
    problems = validate_paths(procedures, fragment=fragment, board_type=board_type, lab_dir=lab.folder)
    if problems:
        fail(EXIT_INPUT, "\n".join(str(p) for p in problems))
    from sequencer.compose import plan_for
    from sequencer.procedure import is_fragment_text, load_procedure, unjudged_warnings

    spec = _bench_to_check(bench_path)
    lines: list[str] = []
    for path in procedures:
        if fragment or is_fragment_text(Path(path).read_text(encoding="utf-8")):
            planned = f"planned for {board_type}" if board_type else "give --board-type to plan it"
            lines.append(f"{path}: ok (fragment; {planned})")
            continue
        plan = plan_for(load_procedure(path, lab_dir=lab.folder), "VALIDATE-ONLY", lab=lab)
        problems += _bench_problems(plan, spec)
        for line in unjudged_warnings(plan):
            click.echo(f"{path}: warning: {line}", err=True)
        lines.append(f"{path}: ok" + (f" (and on bench {spec.name!r})" if spec else ""))
    if problems:
        fail(EXIT_INPUT, "\n".join(str(p) for p in dict.fromkeys(problems)))
    click.echo("\n".join(lines))


def _bench_to_check(bench_path: str | None) -> Any:
    """The bench file ``validate``/``plan --bench`` check against (None: no bench given)."""
    if bench_path is None:
        return None
    from drivers.bench import load_bench

    return load_bench(bench_path)


def _bench_problems(plan: Any, spec: Any) -> list[Any]:
    """What the bench file forbids of ``plan``, located at the bench keys (none without a bench)."""
    if spec is None:
        return []
    from sequencer.engine import bench_problems

    return bench_problems(plan, spec)


@cli.command()
@click.argument("procedure", type=click.Path(dir_okay=False))
@click.option("--board", "serial", default="PLAN-ONLY", show_default=True, help="Board serial for the paths.")
@click.option("--board-type", default=None, help="Board type (default: the procedure's).")
@click.option("--timing-from", "timing_run", type=int, default=None, metavar="RUN_ID",
              help="Take each step's duration from that recorded run where it has the same path.")
@click.option("--sim", "sim_board", type=click.Path(dir_okay=False), default=None,
              help="Estimate with this simulated board file's timing: section (round trips, relays...).")
@click.option("--bench", "bench_path", type=click.Path(dir_okay=False), default=None,
              help="Also check the plan against this bench file (roles, bias limits); nothing is opened.")
@db_option
@handles_errors
def plan(
    procedure: str, serial: str, board_type: str | None, timing_run: int | None,
    sim_board: str | None, bench_path: str | None, db: str | None,
) -> None:
    """Show the expanded step list with paths, counts and an estimated duration.

    The estimate follows the bench timing model the simulator runs by (drivers/timing.py: 1 ms a
    message, acquisitions of averages / trigger rate, gates, relay settling, ramps); --bench takes
    each instrument's timing: from the bench file, --sim a board file's, --timing-from the
    durations of a run already recorded on your bench.
    """
    if sim_board and bench_path:
        # each names the timing of the instruments the estimate is made for: the simulated board's
        # timing: section or the bench file's per instrument; taking one silently misleads
        raise click.UsageError("give --sim BOARD.yaml or --bench BENCH.yaml, not both: each gives the "
                               "instruments' timing the estimate is made with (a simulated board's "
                               "or a real bench's)")
    from sequencer.compose import lab_for, plan_for
    from sequencer.procedure import format_plan, load_procedure

    lab = lab_for(env(), bench_path)  # the bench file's lab: folder, unless BENCHWRIGHT_LAB is set
    if lab.warning():
        click.echo(f"warning: {lab.warning()}", err=True)
    planned = plan_for(
        load_procedure(procedure, lab_dir=lab.folder), serial, board_type=board_type, lab=lab
    )
    bench_spec = _bench_to_check(bench_path)
    if sim_board or bench_spec is not None:
        from sequencer.compose import bench_timing, sim_timing
        from sequencer.procedure.estimate import EstimateSettings, estimate_plan

        timing = sim_timing(sim_board) if sim_board else bench_timing(bench_spec)
        planned = estimate_plan(planned, EstimateSettings(timing=timing))
    from sequencer.procedure import unjudged_warnings

    problems = _bench_problems(planned, bench_spec)
    if problems:
        fail(EXIT_INPUT, "\n".join(str(p) for p in dict.fromkeys(problems)))
    for line in unjudged_warnings(planned):
        click.echo(f"warning: {line}", err=True)
    if timing_run is None:
        click.echo(format_plan(planned))
        return
    from sequencer import compose
    from sequencer.plan_timing import time_by_run

    with compose.open_existing_store(db, env()) as store:
        planned, timing = time_by_run(planned, store, timing_run)
    if timing.procedure != planned.meta.name:
        click.echo(
            f"warning: run {timing_run} ran procedure {timing.procedure!r}, not "
            f"{planned.meta.name!r}: only steps with the same path are timed by it",
            err=True,
        )
    click.echo(format_plan(planned) + timing.describe())


@cli.command()
@click.option("--fragment", is_flag=True, help="The schema of fragments (files for include:).")
@handles_errors
def schema(fragment: bool) -> None:
    """Print the JSON Schema (draft 2020-12) of the procedure format, for editors."""
    from sequencer.procedure import schema_text

    click.echo(schema_text(fragment=fragment))


# -- running ------------------------------------------------------------------------------------


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




@cli.command(epilog=SAFETY_HELP)
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


@cli.command(epilog=SAFETY_HELP)
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


@cli.command()
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


@cli.command()
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
LAZY_COMMANDS: dict[str, str] = {
    "certify": "sequencer.cli_results:certify",
    "verify": "sequencer.cli_results:verify",
    "trend": "sequencer.cli_results:trend",
    "report": "sequencer.cli_results:report",
    "batch": "sequencer.cli_batch:batch",
    "demo": "sequencer.cli_batch:demo",
    "export": "sequencer.cli_export:export",
    "serve": "sequencer.cli_serve:serve",
    "runs": "sequencer.cli_lists:runs",
    "batches": "sequencer.cli_lists:batches",
    "safe": "sequencer.cli_safe:safe",
    "upgrade": "sequencer.cli_upgrade:upgrade",
}


def attach_commands() -> None:
    """Attach the commands that live in their own modules (store-only reports; batch and demo),
    lazily: a module is imported when its command is looked up, so ``runs`` does not pay for
    ``batch``'s imports."""
    group: LazyGroup = cli  # type: ignore[assignment]  # click.group(cls=LazyGroup) made it one
    group.attach_lazily(LAZY_COMMANDS)


def main() -> None:
    """Entry point of the ``benchwright`` command."""
    attach_commands()
    cli()
