"""``benchwright safe`` and the supply state in ``benchwright instruments`` (issue 19, item 3): the
real CLI in a child process against a simulated bench in this process, whose supply is read back
from the simulator's own objects after the CLI has exited.

Checked from outside: a live supply is ramped down at the bench file's rate (a ramp, not a step),
switched off and read back (exit 0); a runner killed with SIGKILL while live leaves the supply live
and ``safe`` then brings it to 0 V and off; a supply that cannot be reached or whose read-back is
not believable gives exit 3 (DESIGN.md: instrument fault) with the reason and UNSAFE; ``instruments``
shows each supply's output state and voltage and names ``benchwright safe`` while one is live.
"""

from __future__ import annotations

import signal
import socket
import time
from pathlib import Path

import yaml

from drivers.dialect import shipped_dialect_path
from sequencer.engine.safety import KEEP_ALIVE_MIN_S
from tests.integration.safety_cli import (
    VOLT,
    Child,
    cli_command,
    run_args,
    run_cli,
    second_session,
    sim_bench,
    supply_state,
    the_run,
    wait_until_live,
    write_board,
    write_procedure,
)
from tests.reliability.hostile import SCPI_NAN, HostileProxy, Lie, text

EXIT_OK, EXIT_ABORT = 0, 3  # DESIGN.md exit codes
RATE = 5.0  # V/s: the bench file's max_ramp_V_per_s (safety_cli.sim_bench default)
TOL = 0.1  # V: the engine's ramp tolerance; the simulated meter's noise is 1 mV rms


def make_live(sim, volts: float = 5.0) -> None:
    """Switch the simulated supply on and ramp it to ``volts`` through a second session (what a
    run leaves behind when it dies at that moment), and wait until it is there (bounded)."""
    with second_session(sim) as bias:
        bias.start_ramp(0.0, RATE)
        bias.set_output(True)
        bias.start_ramp(volts, RATE)
        for _ in range(400):  # 20 s at most: a 5 V ramp at 5 V/s takes one second
            if abs(bias.voltage() - volts) < TOL:
                return
            time.sleep(0.05)
    raise AssertionError(f"the simulated supply did not reach {volts} V")


def assert_off_at_zero(state: dict) -> None:
    assert state["output"] is False, state
    assert abs(state["volts"]) < TOL and state["setpoint"] == 0.0, state


def assert_ramped_down(received: list[str], since: int) -> None:
    """After message ``since``: the ramp rate is set within the bench limit before the set point
    goes to 0 V, and the output goes off only after that (a ramp, never a step)."""
    tail = received[since:]
    slews = [i for i, m in enumerate(tail) if m.startswith("SOURce:VOLTage:SLEW ")]
    zero = tail.index(VOLT + " 0")
    off = tail.index("OUTPut:STATe OFF")
    assert slews and slews[0] < zero < off, tail
    assert 0 < float(tail[slews[0]].split()[-1]) <= RATE, tail


def test_safe_ramps_a_live_supply_down_switches_it_off_and_reads_it_back(tmp_path):
    board = write_board(tmp_path)
    with sim_bench(tmp_path, board) as (sim, bench):
        make_live(sim)
        assert supply_state(sim)["output"] is True
        since = len(supply_state(sim)["received"])
        done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
        state = supply_state(sim)
    assert done.code == EXIT_OK, done
    assert "found output ON" in done.stdout and "(set point 5 V)" in done.stdout
    assert "ramped down at 5 V/s" in done.stdout
    assert "read back: output off" in done.stdout
    assert_off_at_zero(state)
    assert_ramped_down(state["received"], since)


def test_safe_on_a_supply_already_off_says_so_and_exits_0(tmp_path):
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
        state = supply_state(sim)
    assert done.code == EXIT_OK, done
    assert "found output off" in done.stdout and "ramped" not in done.stdout
    assert_off_at_zero(state)


def test_runner_killed_while_live_then_safe_brings_the_supply_to_zero(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        child = Child(
            run_args(write_procedure(tmp_path, soak_s=30.0), bench, db, "--yes"), tmp_path
        )
        try:
            with second_session(sim) as bias:
                wait_until_live(bias, 5.0, child)
            child.kill()  # SIGKILL: no handler, no cleanup
        finally:
            child.kill()
        left = supply_state(sim)
        assert left["output"] is True and abs(left["volts"] - 5.0) < TOL, left  # still live
        shown = run_cli(cli_command("instruments", "--bench", str(bench)), tmp_path)
        listed = run_cli(cli_command("runs", "--db", db), tmp_path)
        done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
        state = supply_state(sim)
    assert "interrupted" in listed.stdout and "benchwright safe --bench" in listed.stderr, listed
    assert "output ON" in shown.stdout and "(set point 5 V)" in shown.stdout
    assert f"benchwright safe --bench {bench}" in shown.stdout
    assert done.code == EXIT_OK, done
    assert_off_at_zero(state)
    assert_ramped_down(state["received"], len(left["received"]))


def test_instruments_shows_the_output_state_of_a_supply_that_is_off(tmp_path):
    with sim_bench(tmp_path, write_board(tmp_path)) as (_sim, bench):
        shown = run_cli(cli_command("instruments", "--bench", str(bench)), tmp_path)
    assert shown.code == EXIT_OK, shown
    assert "output off, " in shown.stdout and "benchwright safe" not in shown.stdout


def test_safe_reports_an_unreachable_supply_as_unsafe(tmp_path):
    with socket.socket() as s:  # a port nothing listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    bench = tmp_path / "bench.yaml"
    address = f"TCPIP0::127.0.0.1::{port}::SOCKET"
    bench.write_text(
        f'bench: dead-bench\ninstruments:\n  bias: {{address: "{address}", max_volts: 60, '
        "max_ramp_V_per_s: 5, timeout_ms: 500}\n"
    )
    done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
    assert done.code == EXIT_ABORT, done
    assert "UNSAFE: bias at" in done.stderr and "cannot reach the supply" in done.stderr
    assert "Traceback" not in done.stderr


def test_safe_on_a_bench_without_a_supply_has_nothing_to_do(tmp_path):
    bench = tmp_path / "bench.yaml"
    bench.write_text(
        'bench: no-bias\ninstruments:\n  pulser: {address: "TCPIP0::127.0.0.1::5025::SOCKET"}\n'
    )
    done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
    assert done.code == EXIT_OK, done
    assert "nothing to make safe" in done.stdout


def test_safe_does_not_believe_a_meter_answering_not_a_number(tmp_path):
    # The supply answers MEASure:VOLTage? with SCPI's NAN: the output is switched off at once,
    # but 0 V cannot be confirmed, so the command says UNSAFE and exits 3.  The real supply
    # (the simulator behind the proxy) is off.
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        make_live(sim)
        data = yaml.safe_load(bench.read_text())
        port = int(data["instruments"]["bias"]["address"].split("::")[2])
        with HostileProxy(("127.0.0.1", port), [Lie("MEASure:VOLT", text(SCPI_NAN))]) as proxy:
            data["instruments"]["bias"]["address"] = proxy.address
            bench.write_text(yaml.safe_dump(data, sort_keys=False))
            done = run_cli(cli_command("safe", "--bench", str(bench)), tmp_path)
        state = supply_state(sim)
    assert done.code == EXIT_ABORT, done
    assert "implausible reading" in done.stdout and "UNSAFE: bias at" in done.stderr
    assert state["output"] is False and abs(state["volts"]) < TOL, state


def test_a_second_sigterm_cuts_the_ramp_down_short_with_the_output_off(tmp_path):
    # 20 V at 5 V/s: the ramp-down after the first SIGTERM takes four seconds; the operator's
    # second SIGTERM during it switches the output off at once (issue 19 item 1).
    db = f"sqlite:///{tmp_path / 'results.db'}"
    proc = write_procedure(tmp_path, volts=20.0, soak_s=30.0, limit_uA=None)
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        child = Child(run_args(proc, bench, db, "--yes"), tmp_path)
        try:
            with second_session(sim) as watcher:
                wait_until_live(watcher, 20.0, child)
                child.proc.send_signal(signal.SIGTERM)
                for _ in range(400):  # a guard of 20 s: the ramp-down starts at once
                    if sim.instruments["bias"].settings.setpoint_V == 0.0:
                        break
                    time.sleep(0.05)
                time.sleep(0.3)  # well into the four-second ramp
                midway = supply_state(sim)
                child.proc.send_signal(signal.SIGTERM)
                done = child.wait()
        finally:
            child.kill()
        state = supply_state(sim)
    assert midway["output"] is True and 1.0 < midway["volts"] < 20.0, midway  # still ramping
    assert done.code == EXIT_ABORT, done
    assert_off_at_zero(state)
    _run, events = the_run(db)
    cut = [e for e in events if e.kind == "ramp_cut"]
    assert len(cut) == 1 and "stop request" in cut[0].detail["error"]
    k = [e.kind for e in events]
    assert k.index("ramp_cut") < len(k) - 1 - k[::-1].index("output")  # then the output off


def with_keep_alive(bench: Path, folder: Path) -> None:
    """Give the bench's supply a lab dialect that declares the simulated supply's keep-alive."""
    generic = shipped_dialect_path("generic").read_text(encoding="utf-8")
    absent = '    set_keep_alive: {absent: "SCPI-1999 has no standard keep-alive command"}'
    assert absent in generic
    dialect = folder / "supply-with-keepalive.yaml"
    dialect.write_text(
        generic.replace(absent, '    set_keep_alive: {write: "OUTPut:KEEPalive:TIMeout {seconds:g}"}')
        .replace("dialect: generic", "dialect: supply-with-keepalive"),
        encoding="utf-8",
    )
    data = yaml.safe_load(bench.read_text())
    data["instruments"]["bias"]["dialect"] = str(dialect)
    bench.write_text(yaml.safe_dump(data, sort_keys=False))


def test_a_keep_alive_is_armed_before_going_live_and_disarmed_once_safe(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        with_keep_alive(bench, tmp_path)
        done = run_cli(run_args(write_procedure(tmp_path), bench, db, "--yes"), tmp_path)
        state = supply_state(sim)
        lapses = sim.instruments["bias"].keep_alive_lapses
    assert done.code == EXIT_OK, done
    assert_off_at_zero(state)
    assert lapses == 0  # a healthy run is never cut off
    _run, events = the_run(db)
    k = [e.kind for e in events]
    armed = [e.detail["seconds"] for e in events if e.kind == "keep_alive"]
    assert armed == [KEEP_ALIVE_MIN_S, 0.0]
    assert k.index("keep_alive") < k.index("output")  # armed before the output went on
    assert k.index("safe_state") < len(k) - 1 - k[::-1].index("keep_alive")  # disarmed after


def test_a_supply_with_a_keep_alive_switches_itself_off_when_its_runner_is_killed(tmp_path):
    # A lab dialect declaring the simulated supply's own keep-alive: the run arms it before going
    # live (KEEP_ALIVE_MIN_S, 5 s); killed with SIGKILL, the run sends nothing more and the supply
    # switches its output off by itself -- no `benchwright safe` needed.
    db = f"sqlite:///{tmp_path / 'results.db'}"
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        with_keep_alive(bench, tmp_path)
        child = Child(
            run_args(write_procedure(tmp_path, soak_s=30.0), bench, db, "--yes"), tmp_path
        )
        try:
            with second_session(sim) as watcher:
                wait_until_live(watcher, 5.0, child)
            child.kill()  # SIGKILL: no handler, no cleanup
        finally:
            child.kill()
        time.sleep(KEEP_ALIVE_MIN_S + 1.0)  # nothing reaches the supply meanwhile
        with second_session(sim) as watcher:  # its first message applies the elapsed time
            on, volts = watcher.output_on(), watcher.voltage()
        lapses = sim.instruments["bias"].keep_alive_lapses
    assert on is False and abs(volts) < TOL and lapses == 1, (on, volts, lapses)
    _run, events = the_run(db)
    armed = [e.detail["seconds"] for e in events if e.kind == "keep_alive"]
    assert armed == [KEEP_ALIVE_MIN_S]  # armed once, before going live; never disarmed
