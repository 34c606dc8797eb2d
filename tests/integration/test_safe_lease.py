"""``benchwright safe`` honours a live run's lease (issue 19: "``resume``/``safe`` can take over a
dead run's bench explicitly"): the real CLI in child processes against a simulated bench here.

A run still going holds its bench: ``safe`` refuses (exit 2, DESIGN.md: refused input) and sends
nothing to the supply; with ``--take-over`` it brings the supply down, records the take-over with
the run (interrupted, audited), and the old run -- alive after all -- loses its lease at its next
heartbeat, stops (exit 3) and does not write its "aborted" over the record.  States, order and
counts are asserted, no wall-clock bounds (timeouts only guard against a hang).
"""

from __future__ import annotations

from sequencer.store import Store
from tests.integration.safety_cli import (
    Child,
    cli_command,
    run_args,
    run_cli,
    second_session,
    sim_bench,
    supply_state,
    wait_until_live,
    write_board,
    write_procedure,
)

EXIT_OK, EXIT_INPUT, EXIT_ABORT = 0, 2, 3  # DESIGN.md exit codes
TOL = 0.1  # V: the engine's ramp tolerance; the simulated meter's noise is 1 mV rms


def test_safe_refuses_a_bench_held_by_a_live_run_and_takes_it_over_when_told(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        child = Child(
            run_args(write_procedure(tmp_path, soak_s=120.0), bench, db, "--yes"), tmp_path
        )
        try:
            with second_session(sim) as bias:
                wait_until_live(bias, 5.0, child)
            sent = len(supply_state(sim)["received"])
            refused = run_cli(cli_command("safe", "--bench", str(bench), "--db", db), tmp_path)
            after_refusal = supply_state(sim)
            taken = run_cli(
                cli_command("safe", "--bench", str(bench), "--db", db, "--take-over"), tmp_path
            )
            state = supply_state(sim)
            old = child.wait(timeout_s=120.0)
        finally:
            child.kill()
    assert refused.code == EXIT_INPUT, refused
    assert "held by a run that looks live" in refused.stderr and "--take-over" in refused.stderr
    assert after_refusal["output"] is True and abs(after_refusal["volts"] - 5.0) < TOL
    # the refused command never spoke to the supply; only the live run's own polls came in
    assert not any(m.startswith(("OUTPut:STATe OFF", "SOURce:VOLTage:SLEW"))
                   for m in after_refusal["received"][sent:])
    assert taken.code == EXIT_OK, taken
    assert "took over the bench from run 1" in taken.stdout
    assert state["output"] is False and abs(state["volts"]) < TOL, state
    assert old.code == EXIT_ABORT, old  # the old run lost its lease and stopped
    assert "lease was lost" in old.stderr and "safe --take-over" in old.stderr, old.stderr
    with Store.open(db, create=False) as store:
        run = store.list_runs()[0]
        trail = [a.kind for a in store.audit_trail(run.id)]
    assert run.status == "interrupted" and "safe --take-over" in run.reason, run
    assert "safe_take_over" in trail and "lease_lost" in trail
    assert trail.index("safe_take_over") < trail.index("lease_lost")
    assert "finished" not in trail  # the old run's "aborted" was not written over the record


def test_the_lease_check_waits_briefly_for_a_postgresql_server():
    # libpq's connect_timeout is in seconds and at least 2 (PostgreSQL docs, "Connection
    # Strings", parameter connect_timeout); the store otherwise waits 10 s for a server.
    from sqlalchemy.engine import make_url

    from sequencer.cli_safe import with_short_connect_timeout

    url = make_url(with_short_connect_timeout("postgresql+psycopg://lab@db.example/results"))
    assert url.query == {"connect_timeout": "2"} and url.database == "results"
    named = "postgresql+psycopg://lab@db.example/results?connect_timeout=30"
    assert with_short_connect_timeout(named) == named
    with_option = make_url(with_short_connect_timeout("postgresql+psycopg://db/r?sslmode=require"))
    assert with_option.query == {"sslmode": "require", "connect_timeout": "2"}
    assert with_short_connect_timeout("sqlite:///results.db") == "sqlite:///results.db"
