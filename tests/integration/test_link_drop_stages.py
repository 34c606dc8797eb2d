"""A link dropped at every stage of a bias ramp, over every link kind (raw socket, HiSLIP, VXI-11).

The run (the real ``benchwright run`` in a child process, tests/integration/safety_cli.py) ramps the
simulated supply to 5 V at 5 V/s, holds it, ramps down.  The supply's link drops at one stage:

* ``before_ramp``: on the slew command, output on at 0 V, the ramp not yet begun;
* ``mid_ramp``: 0.4 s after the set point (about 2 V of 5);
* ``at_top``: 1.8 s after the set point (at 5 V, holding);
* ``ramp_down``: 0.3 s after the ramp-down's 0 V set point.

When the link comes back (``disconnect``: a new connection works) the run ends with exit 3 (DESIGN.md
exit codes), one abort line naming the supply's address and the dropped link, and the supply reads
0 V with its output off.  When it does not: test_link_down_unsafe.py.

The outside facts checked are the supply's own read-back (a second client) and the simulator's
state; 0.1 V is the engine's ramp tolerance (the project's own figure, common practice).
"""

from __future__ import annotations

import pytest

from tests.integration.safety_cli import (
    VOLT,
    last_line,
    run_args,
    run_cli,
    second_session,
    sim_bench,
    supply_state,
    the_run,
    write_board,
    write_procedure,
)

EXIT_ABORT = 3  # DESIGN.md exit codes
TOL = 0.1  # V, the engine's ramp tolerance
LINKS = ("socket", "hislip", "vxi11")
#: stage -> where the fault counts from and how long after
STAGES = {
    "before_ramp": {"after_message": "SOURce:VOLTage:SLEW", "after_commands": 0},
    "mid_ramp": {"after_message": f"{VOLT} 5", "after_s": 0.4},
    "at_top": {"after_message": f"{VOLT} 5", "after_s": 1.8},
    "ramp_down": {"after_message": f"{VOLT} 0", "after_s": 0.3},
}


def address_marker(link: str) -> str:
    return {"socket": "::SOCKET", "hislip": "::hislip0,", "vxi11": "::inst0::INSTR"}[link]


def faulty_board(tmp_path, stage: str, kind: str):  # type: ignore[no-untyped-def]
    """(results database URL, board file whose supply's link fails with ``kind`` at ``stage``)."""
    db = f"sqlite:///{tmp_path / 'results.db'}"
    fault = {"kind": kind, "role": "bias", **STAGES[stage]}
    return db, write_board(tmp_path, faults=[fault])


@pytest.mark.slow
@pytest.mark.parametrize("stage", sorted(STAGES))
@pytest.mark.parametrize("link", LINKS)
def test_a_link_that_comes_back_ends_with_the_supply_off_at_zero(tmp_path, link, stage):
    db, board = faulty_board(tmp_path, stage, "disconnect")
    # a short link timeout: a dead VXI-11 link costs one timeout (+1 s) per call
    with sim_bench(tmp_path, board, link=link, bias_timeout_ms=1500) as (sim, bench):
        done = run_cli(
            run_args(write_procedure(tmp_path, soak_s=3.0), bench, db, "--yes"), tmp_path
        )
        state = supply_state(sim)
        with second_session(sim) as bias:
            read_back = (bias.output_on(), bias.voltage())
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert "bias at TCPIP0::127.0.0.1" in line and address_marker(link) in line, line
    assert "link to the supply dropped" in line or "connection closed" in line, line
    assert "UNSAFE" not in line and "internal error" not in line, line
    assert read_back[0] is False and abs(read_back[1]) < TOL, read_back
    assert state["output"] is False and abs(state["volts"]) < TOL
    run, events = the_run(db)
    assert run.status == "aborted"
    assert [e.kind for e in events][-1] == "safe_state"
