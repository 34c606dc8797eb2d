"""A bias supply's link that goes down mid-ramp and stays down, over every link kind (raw socket,
HiSLIP, VXI-11): the safe state cannot be confirmed, so the run's last line is the UNSAFE
instruction naming ``benchwright safe --bench FILE`` (exit 3, DESIGN.md exit codes); the supply is
indeed still live (the simulator's own state: no client can reach it), and that command, once the
link is back, brings it to 0 V and off.  The stages and the link-returns case:
test_link_drop_stages.py.  0.1 V is the engine's ramp tolerance (the project's own figure).
"""

from __future__ import annotations

import pytest

from tests.integration.safety_cli import (
    cli_command,
    last_line,
    run_args,
    run_cli,
    sim_bench,
    supply_state,
    the_run,
    write_procedure,
)
from tests.integration.test_link_drop_stages import LINKS, address_marker, faulty_board

EXIT_ABORT = 3  # DESIGN.md exit codes
TOL = 0.1  # V, the engine's ramp tolerance


@pytest.mark.slow
@pytest.mark.parametrize("link", LINKS)
def test_a_link_that_stays_down_mid_ramp_ends_with_the_unsafe_instruction(tmp_path, link):
    db, board = faulty_board(tmp_path, "mid_ramp", "link_down")
    with sim_bench(tmp_path, board, link=link, bias_timeout_ms=1000) as (sim, bench):
        procedure = write_procedure(tmp_path, soak_s=3.0)
        # the run retries a link that never returns (bounded): more than a normal run's time
        done = run_cli(run_args(procedure, bench, db, "--yes"), tmp_path, timeout_s=180.0)
        live = supply_state(sim)
        sim.restore_link("bias")  # the cable is back: the command the line names does the rest
        safe = run_cli(cli_command("safe", "--bench", str(bench), "--db", db), tmp_path)
        after = supply_state(sim)
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert line.count("UNSAFE: bias at TCPIP0::127.0.0.1") == 1, line
    assert address_marker(link) in line, line
    assert f"benchwright safe --bench {bench}" in line, line
    # the word is the truth: the supply never heard the ramp-down and is still live
    assert live["output"] is True and live["volts"] > 1.0, live
    run, events = the_run(db)
    assert run.status == "aborted" and "UNSAFE" in run.reason
    assert "unsafe" in [e.kind for e in events]
    assert safe.code == 0, safe
    assert after["output"] is False and abs(after["volts"]) < TOL, after
