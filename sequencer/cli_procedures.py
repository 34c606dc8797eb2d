"""``benchwright validate``, ``plan`` and ``schema``: procedure files checked, expanded and
described (attached lazily by ``cli.py``, so a command that only reads the store does not pay for
defining them)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from sequencer.cli_common import EXIT_INPUT, db_option, env, fail, handles_errors


@click.command()
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


@click.command()
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


@click.command()
@click.option("--fragment", is_flag=True, help="The schema of fragments (files for include:).")
@handles_errors
def schema(fragment: bool) -> None:
    """Print the JSON Schema (draft 2020-12) of the procedure format, for editors."""
    from sequencer.procedure import schema_text

    click.echo(schema_text(fragment=fragment))
