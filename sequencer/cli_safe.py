"""``benchwright safe --bench FILE``: every bias supply of a bench ramped down, switched off and read
back -- after a crash, a SIGKILL or a dead PC left a supply live (attached by ``cli.py``).

Exit 0 when every supply reads back off at ~0 V; 3 (DESIGN.md: an instrument fault) otherwise, with
the reason.  SIGINT/SIGTERM cut a ramp-down short: the output is then switched off at once.

A run still going on the bench holds it (its lease in the results database, ``--db``): ``safe``
refuses (exit 2) and touches nothing, unless ``--take-over`` says that run's process or PC is dead;
the take-over is recorded with the run (``store.bench_lease``).  A database that cannot be read
never keeps a supply live: ``safe`` says so and goes ahead.
"""

from __future__ import annotations

import sys
from typing import Any

import click

from sequencer.cli_common import (
    EXIT_ABORT,
    EXIT_INPUT,
    EXIT_OK,
    SAFETY_HELP,
    db_option,
    env,
    handles_errors,
    visa_library_option,
)

#: SQLite: how long ``safe`` waits for another writer's lock before it goes ahead without the check;
#: PostgreSQL: how long it waits for the server to answer (libpq ``connect_timeout``, seconds).
LEASE_CHECK_BUSY_S = 2.0


@click.command(epilog=SAFETY_HELP)
@click.option("--bench", "bench_path", required=True, type=click.Path(dir_okay=False),
              help="Bench file whose bias supplies are to be made safe.")
@db_option
@click.option("--take-over", is_flag=True,
              help="Act even though a run that looks live holds the bench (you know its process "
              "or PC is dead); recorded with that run, which becomes interrupted.")
@visa_library_option
@handles_errors
def safe(
    bench_path: str, db: str | None, take_over: bool, allow_visa_library: tuple[str, ...]
) -> None:
    """Ramp every bias output of the bench down at its permitted rate, switch it off, read it back.

    For a bench that nothing else drives any more (a crashed or killed run, a dead PC); a run that
    is still going is stopped with Ctrl-C instead, which brings its bias down itself: a run that
    looks live in the results database is refused unless --take-over is given.
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
    check_bench_lease(spec.name, bench_path, db, take_over=take_over)
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


def check_bench_lease(bench: str, bench_path: str, db: str | None, *, take_over: bool) -> None:
    """Refuse (exit 2) while a live run holds ``bench``, unless ``take_over``: then record it."""
    from sequencer.errors import StoreError
    from sequencer.store import Store, default_url

    url = with_short_connect_timeout(db or default_url(env()))
    try:
        store: Any = Store.open(url, create=False, busy_timeout_s=LEASE_CHECK_BUSY_S)
    except StoreError as exc:
        if not str(exc).startswith("no database at"):
            click.echo(f"note: cannot check for a run holding the bench ({exc}); going ahead", err=True)
        return
    with store:
        try:
            found = store.bench_holders(bench)
        except StoreError as exc:
            click.echo(f"note: cannot check for a run holding the bench ({exc}); going ahead", err=True)
            return
        for holder in (h for h in found if not h.live):
            click.echo(f"note: {holder.describe()}; its recorder is gone, so it holds nothing")
        live = [h for h in found if h.live]
        if live and not take_over:
            lines = [f"refused: bench {bench!r} is held by a run that looks live:"]
            lines += [f"  {h.describe()}" for h in live]
            lines.append(
                "Stop that run with Ctrl-C where it runs (it brings its bias down itself); if you "
                f"know its process or PC is dead: benchwright safe --bench {bench_path} --take-over"
            )
            click.echo("\n".join(lines), err=True)
            sys.exit(EXIT_INPUT)
        for holder in live:
            try:
                store.take_bench(holder)
                click.echo(f"took over the bench from {holder.describe()}: run {holder.run_id} "
                           "marked interrupted (its process, if alive, stops at its next heartbeat)")
            except StoreError as exc:
                click.echo(f"note: the take-over of run {holder.run_id} was not recorded ({exc}); "
                           "going ahead", err=True)


def with_short_connect_timeout(url: str) -> str:
    """A PostgreSQL URL with libpq's ``connect_timeout`` set to ``LEASE_CHECK_BUSY_S`` unless it
    names one: an unreachable server must not hold a live supply for the store's usual 10 s."""
    if not url.startswith("postgresql") or "connect_timeout=" in url:
        return url
    return f"{url}{'&' if '?' in url else '?'}connect_timeout={int(LEASE_CHECK_BUSY_S)}"
