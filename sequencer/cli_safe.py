"""``benchwright safe --bench FILE``: every bias supply of a bench ramped down, switched off and read
back -- after a crash, a SIGKILL or a dead PC left a supply live (attached by ``cli.py``).

Exit 0 when every supply reads back off at ~0 V; 3 (DESIGN.md: an instrument fault) otherwise, with
the reason.  SIGINT/SIGTERM cut a ramp-down short: the output is then switched off at once.
"""

from __future__ import annotations

import sys

import click

from sequencer.cli_common import (
    EXIT_ABORT,
    EXIT_OK,
    SAFETY_HELP,
    handles_errors,
    visa_library_option,
)


@click.command(epilog=SAFETY_HELP)
@click.option("--bench", "bench_path", required=True, type=click.Path(dir_okay=False),
              help="Bench file whose bias supplies are to be made safe.")
@visa_library_option
@handles_errors
def safe(bench_path: str, allow_visa_library: tuple[str, ...]) -> None:
    """Ramp every bias output of the bench down at its permitted rate, switch it off, read it back.

    For a bench that nothing else drives any more (a crashed or killed run, a dead PC); a run that
    is still going is stopped with Ctrl-C instead, which brings its bias down itself.
    """
    from drivers.bench import open_role
    from drivers.benchfile import load_bench
    from drivers.errors import BenchwrightError
    from drivers.safestate import make_supply_safe
    from sequencer.engine.context import StopFlag
    from sequencer.engine.safety import MANUAL_OFF
    from sequencer.engine.signals import stop_on_signals

    spec = load_bench(bench_path, allowed_visa_libraries=allow_visa_library)
    supplies = [(role, inst) for role, inst in spec.instruments.items() if inst.role == "bias"]
    if not supplies:
        click.echo(f"{bench_path}: no bias supply in this bench file; nothing to make safe")
        sys.exit(EXIT_OK)
    stop = StopFlag()
    unsafe: list[str] = []
    with stop_on_signals(stop):
        for role, inst in supplies:
            who = f"{role} at {inst.address}"
            try:
                driver, _identity = open_role(inst)
            except BenchwrightError as exc:
                unsafe.append(f"{who}: cannot reach the supply ({exc})")
                click.echo(f"{who}: cannot reach the supply: {exc}")
                continue
            try:
                outcome = make_supply_safe(driver, should_stop=lambda: stop.requested)
            finally:
                driver.session.close()
            click.echo(f"{who}: found {outcome.before if outcome.before else 'state unknown'}")
            for action in outcome.actions:
                click.echo(f"  {action}")
            if outcome.after is not None:
                click.echo(f"  read back: {outcome.after}")
            if outcome.problem:
                unsafe.append(f"{who}: {outcome.problem}")
    if unsafe:
        for line in unsafe:
            click.echo(f"UNSAFE: {line}; {MANUAL_OFF}", err=True)
        sys.exit(EXIT_ABORT)
    click.echo(f"safe: {len(supplies)} bias supply(ies) read back off at 0 V")
    sys.exit(EXIT_OK)
