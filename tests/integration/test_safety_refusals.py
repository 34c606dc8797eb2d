"""Operator safety, before anything is live: ``benchwright run`` (a child process) against a simulated
bench in this process, whose supply is read back after the CLI has exited.

Refusals checked from outside: no terminal and no ``--yes`` (exit 3, nothing applied, the run kept as
aborted); a procedure asking more than the bench file allows (exit 2 before any command reaches any
instrument, no run created); an open interlock before the first ramp (exit 3, no voltage); an operator
who declines the caution on a real terminal (a pseudo-terminal here); the cautions in ``--help``.
"""

from __future__ import annotations

import pytest

from sequencer.store import Store
from tests.integration.safety_cli import (
    ADVICE,
    answer_on_terminal,
    cli_command,
    kinds,
    last_line,
    run_args,
    run_cli,
    second_session,
    sim_bench,
    supply_state,
    the_run,
    voltage_commands,
    write_board,
    write_procedure,
)

EXIT_INPUT, EXIT_ABORT = 2, 3  # DESIGN.md exit codes


def assert_nothing_applied(state: dict) -> None:
    """The supply was never switched on and no non-zero voltage was ever programmed."""
    assert state["ever_on"] is False and state["output"] is False
    assert state["setpoint"] == 0.0 and state["volts"] == 0.0
    assert all(v == 0.0 for v in voltage_commands(state["received"])), state["received"]
    assert not any(m.startswith("OUTPut:STATe ON") for m in state["received"])


def test_no_terminal_and_no_yes_refuses_and_applies_nothing(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        done = run_cli(run_args(write_procedure(tmp_path), bench, db), tmp_path)
        state = supply_state(sim)
        with second_session(sim) as bias:  # read back over a socket of its own
            assert bias.output_on() is False
            assert abs(bias.voltage()) < 0.01  # meter noise 1 mV rms (board default)
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert line.startswith("aborted: ") and "--yes" in line and "no voltage applied" in line
    assert "Traceback" not in done.stderr
    assert_nothing_applied(state)
    # Decision: the run is created (it has provenance worth keeping) and recorded as aborted, with
    # the refusal as its reason; no acknowledgement is stored, the safe state is read back.
    run, events = the_run(db)
    assert run.status == "aborted" and "--yes" in run.reason
    assert "acknowledgement" not in kinds(events)
    assert "ramp_start" not in kinds(events)


def test_over_limit_procedure_is_refused_before_any_command(tmp_path):
    # one procedure asking for more than the bench file allows on all three counts; each is
    # reported on its own line (and each alone refuses the run: sequencer/engine/preflight.py)
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path), max_volts=10.0, max_current_uA=100.0) as (
        sim,
        bench,
    ):
        proc = write_procedure(tmp_path, volts=12.0, rate=8.0, limit_uA=150.0)
        done = run_cli(run_args(proc, bench, db, "--yes"), tmp_path)
        received = {role: list(inst.received) for role, inst in sim.instruments.items()}
        state = supply_state(sim)
    assert done.code == EXIT_INPUT, done
    lines = done.stderr.strip().splitlines()
    for expected in (
        "12 V exceeds the bench limit 10 V",
        "ramp rate 8 V/s exceeds the bench limit 5 V/s",
        "current limit 150 uA exceeds the bench limit 100 uA",
    ):
        assert any(expected in line for line in lines), (expected, lines)
    # file:line:column: message, at the bench file's key that sets the limit (issue 22: not 1:1),
    # naming the step and where it stands in the procedure
    bench_lines = bench.read_text(encoding="utf-8").splitlines()
    for line in lines:
        where, _, message = line.partition(": ")
        file, number, column = where.rsplit(":", 2)
        assert file == str(bench), line
        key = next(k for k in ("max_volts", "max_ramp_V_per_s", "max_current_uA") if k in message)
        assert bench_lines[int(number) - 1][int(column) - 1 :].startswith(
            bench_value(bench_lines, key)
        ), line
    assert all(f"at {proc}:" in line for line in lines if line.split(": ", 1)[1].startswith("step"))
    # not one message reached any instrument, not even *IDN?
    assert received == {role: [] for role in received}
    assert_nothing_applied(state)
    with Store.open(db) as store:  # refused before the run began: no run is created
        assert store.list_runs() == []


def bench_value(lines: list[str], key: str) -> str:
    """The text of ``key``'s value in the bench file's ``bias`` entry (block or flow style)."""
    import re

    for text in lines:
        match = re.search(rf"\b{key}: ([^,}}\s]+)", text)
        if match:
            return match[1]
    raise AssertionError(f"{key} not in the bench file")


def test_interlock_open_before_the_first_ramp_refuses(tmp_path):
    # The simulator's interlock opens 0.2 s after the output first turns on and stays open (as a
    # real interlock loop stays open until someone closes it): a first run trips it, the second
    # run on the same supply must then refuse before it ramps.
    board = write_board(tmp_path, faults=[{"kind": "interlock_open", "after_s": 0.2}])
    db = f"sqlite:///{tmp_path / 'first.db'}"
    with sim_bench(tmp_path, board) as (sim, bench):
        first = run_cli(
            run_args(write_procedure(tmp_path, soak_s=5.0), bench, db, "--yes"), tmp_path
        )
        assert first.code == EXIT_ABORT and "interlock" in last_line(first.stderr), first
        before = len(sim.instruments["bias"].received)
        again = f"sqlite:///{tmp_path / 'second.db'}"
        done = run_cli(run_args(write_procedure(tmp_path), bench, again, "--yes"), tmp_path)
        state = supply_state(sim)
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert "interlock open" in line and "refusing to apply voltage" in line, line
    second = state["received"][before:]
    assert "SYSTem:INTerlock:STATe?" in second  # it asked
    assert all(v == 0.0 for v in voltage_commands(second)), second
    assert not any(m.startswith("OUTPut:STATe ON") for m in second)
    assert state["output"] is False and state["volts"] == 0.0
    run, events = the_run(again)
    assert run.status == "aborted" and "interlock" in run.reason
    interlock = [e for e in events if e.kind == "interlock"]
    assert interlock and interlock[0].detail["closed"] is False
    assert "acknowledgement" not in kinds(events)  # asked only once the interlock is closed


def on_terminal(tmp_path, answer: str, *, soak_s: float = 0.3):
    """Run on a pseudo-terminal and answer the caution with ``answer`` (typed text, or the name of
    a signal sent while the prompt waits); (what the terminal showed, exit code, supply state)."""
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        proc = write_procedure(tmp_path, volts=5.0, soak_s=soak_s)
        args = run_args(proc, bench, db, "--operator", "R. Okafor")
        linger = 15.0 if answer == "y" else 2.0
        text, code = answer_on_terminal(args, tmp_path, b"[y/N]", answer, linger_s=linger)
        state = supply_state(sim)
    return text, code, state, db


@pytest.mark.parametrize("answer", ["n", "SIGINT", "SIGTERM"])
def test_terminal_shows_the_caution_and_a_declined_caution_applies_nothing(tmp_path, answer):
    # declined by typing "n", or cancelled by Ctrl-C / SIGTERM while the prompt waits
    text, code, state, db = on_terminal(tmp_path, answer)
    assert "CAUTION" in text and "Maximum 5 V" in text, text
    assert ADVICE in text.lower(), text
    assert "Acknowledge and make the voltage live? [y/N]" in text  # legible, default no
    assert code == EXIT_ABORT, text
    assert "declined" in text
    assert_nothing_applied(state)
    run, events = the_run(db)
    assert run.status == "aborted"
    ack = [e for e in events if e.kind == "acknowledgement"]
    assert len(ack) == 1 and ack[0].detail["mode"] == "declined"
    assert ack[0].detail["operator"] == "R. Okafor" and ack[0].detail["unattended"] is False
    assert ack[0].detail["at"]  # the time of the answer


def test_terminal_acknowledgement_is_recorded_and_the_run_ends_at_zero(tmp_path):
    text, code, state, db = on_terminal(tmp_path, "y")
    assert code == 0, text
    assert state["ever_on"] is True  # it did go live, after the answer
    assert state["output"] is False and abs(state["volts"]) < 0.1 and state["setpoint"] == 0.0
    run, events = the_run(db)
    assert run.status == "completed"
    k = kinds(events)
    ack = events[k.index("acknowledgement")]
    assert ack.detail["mode"] == "interactive" and ack.detail["unattended"] is False
    assert ack.detail["operator"] == "R. Okafor" and ack.detail["at"]
    assert k.index("acknowledgement") < k.index("output") < k.index("ramp_start")
    assert k[-1] == "safe_state"


@pytest.mark.parametrize("command", ["run", "resume"])
def test_help_carries_the_caution_legibly(tmp_path, command):
    done = run_cli(cli_command(command, "--help"), tmp_path)
    assert done.code == 0, done
    text = done.stdout
    assert "CAUTION" in text and "hardware interlock" in text and "local codes" in text
    # wrapped to the terminal (COLUMNS=80 in the child), not one unbroken line
    assert max(len(line) for line in text.splitlines()) <= 80, text
    caution = " ".join(text[text.index("CAUTION") :].split())
    assert "More than 33 V rms / 46.7 V peak / 70 V dc counts as hazardous live" in caution
