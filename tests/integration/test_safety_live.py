"""Operator safety while a voltage is live: ``benchwright run`` (a child process) against a simulated
bench in this process; the supply is watched through a second session while the run drives it and
read back after the CLI has exited.

Checked from outside: the normal end ramps down to 0 V; an opening interlock (the simulator's
``interlock_open`` fault), SIGTERM and SIGINT, a dropped link and a silent supply each end the run
with exit 3 and one line naming the cause, the bias brought to 0 V with the output off and verified,
or reported UNSAFE when that cannot be confirmed; an over-current trips at the bench file's limit.
Ramps are 5 V at 5 V/s (one second each way) so the whole file stays quick.
"""

from __future__ import annotations

import signal
import time

import numpy as np
import pytest

from drivers.bench import load_bench, open_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions
from sequencer.errors import StoreError
from sequencer.events import SafetyEvent
from sequencer.procedure import load_procedure
from tests.integration.safety_cli import (
    SERIAL,
    VOLT,
    Child,
    kinds,
    last_line,
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

EXIT_OK, EXIT_ABORT = 0, 3  # DESIGN.md exit codes
RATE = 5.0  # V/s, the bench file's max_ramp_V_per_s in these tests
TOL = 0.1  # V: 0 V read back within the engine's ramp tolerance (meter noise 1 mV rms)


def assert_off_at_zero(state: dict) -> None:
    """Output off, 0 V at the output, and the set point back at 0 V (so the next switch-on cannot
    jump to the old voltage)."""
    assert state["output"] is False, state
    assert abs(state["volts"]) < TOL and state["setpoint"] == 0.0, state


def assert_only_ramps(received: list[str], max_rate: float) -> None:
    """Every non-zero set point follows a ramp rate within the limit; the output goes on only with
    the set point at 0 V (voltages are never stepped)."""
    slew: float | None = None
    setpoint = 0.0
    for message in received:
        if message.startswith("SOURce:VOLTage:SLEW "):
            slew = float(message.split()[-1])
        elif message.startswith(VOLT + " "):
            setpoint = float(message.split()[-1])
            if setpoint != 0.0:
                assert slew is not None and 0 < slew <= max_rate, (message, slew)
        elif message.startswith("OUTPut:STATe ON"):
            assert setpoint == 0.0, "output switched on with a set point above 0 V"


def slope(samples: list[tuple[float, float]], low: float, high: float) -> float:
    """V/s of (t, V) samples between ``low`` and ``high`` volts: least-squares line (numpy)."""
    pts = np.array([(t, v) for t, v in samples if low < v < high])
    assert len(pts) >= 5, samples
    return float(np.polyfit(pts[:, 0], pts[:, 1], 1)[0])


def timed_watch(bias, child) -> list[tuple[float, bool, float]]:
    """(time, output on, V) through the second session until the CLI ends."""
    seen = []
    deadline = time.monotonic() + 30.0
    while child.proc.poll() is None and time.monotonic() < deadline:
        on, v = bias.output_on(), bias.voltage()
        seen.append((time.monotonic(), on, v))
        time.sleep(0.02)
    return seen


def test_normal_end_ramps_down_to_zero_and_stores_every_event(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    # no bias.limit step: the supply must trip at the bench file's max_current_uA
    proc = write_procedure(tmp_path, soak_s=0.3, limit_uA=None)
    with sim_bench(tmp_path, write_board(tmp_path), max_current_uA=20.0) as (sim, bench):
        child = Child(run_args(proc, bench, db, "--yes", "--operator", "A. Technician"), tmp_path)
        try:
            with second_session(sim) as bias:
                seen = timed_watch(bias, child)
            done = child.wait()
        finally:
            child.kill()
        state = supply_state(sim)
    assert done.code == EXIT_OK, done
    assert_off_at_zero(state)
    # the bench file's trip level reached the supply
    assert state["limit_A"] == pytest.approx(20e-6)
    assert_only_ramps(state["received"], RATE)
    # the voltage was seen rising and falling through intermediate values at the permitted rate
    live = [(t, v) for t, on, v in seen if on]
    peak = max(v for _, v in live)
    assert peak == pytest.approx(5.0, abs=TOL)
    top = next(i for i, (_, v) in enumerate(live) if v > 4.9)
    up = slope(live[:top], 0.5, 4.5)
    down = slope(live[top:], 0.5, 4.5)
    assert up == pytest.approx(RATE, rel=0.15) and down == pytest.approx(-RATE, rel=0.15)
    run, events = the_run(db)
    assert run.status == "completed"
    k = kinds(events)
    ack = events[k.index("acknowledgement")]
    assert ack.detail["operator"] == "A. Technician" and ack.detail["unattended"] is True
    assert ack.detail["at"] and ack.detail["max_volts"] == 5.0
    assert k.index("interlock") < k.index("acknowledgement") < k.index("ramp_start")
    limit = events[k.index("current_limit")]
    assert limit.detail["uA"] == 20.0 and limit.detail["source"] == "bench file"
    starts = [e.detail for e in events if e.kind == "ramp_start"]
    ends = [e.detail["volts"] for e in events if e.kind == "ramp_end"]
    assert [s["to_V"] for s in starts] == [5.0, 0.0] and all(
        s["rate_V_per_s"] == RATE for s in starts
    )
    assert ends == [pytest.approx(5.0, abs=TOL), pytest.approx(0.0, abs=TOL)]
    read = next(e for e in events if e.kind == "reading" and e.path == "read")
    # I = V / R (Ohm's law): 5 V across the board's 5000 MOhm leakage path = 1 nA, plus the
    # simulated meter's 0.02 nA offset (drivers/sim/board.py default)
    assert read.detail["current_A"] == pytest.approx(1.02e-9, rel=0.05)
    assert k[-1] == "safe_state" and events[-1].detail["output"] is False


def completed_paths(url: str) -> list[str]:
    """Paths of the completed steps of the only run at ``url`` (order of events, not a clock)."""
    from sequencer.store import Store

    with Store.open(url) as store:
        (run,) = store.list_runs()
        return [s.path for s in store.steps(run.id) if s.status == "completed"]


def test_interlock_opening_while_live_brings_the_supply_safe(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    # opens 1.5 s after the output first went on: 0.5 s into a 10 s soak at 5 V
    board = write_board(tmp_path, faults=[{"kind": "interlock_open", "after_s": 1.5}])
    with sim_bench(tmp_path, board) as (sim, bench):
        done = run_cli(
            run_args(write_procedure(tmp_path, soak_s=10.0), bench, db, "--yes"), tmp_path
        )
        state = supply_state(sim)
        with second_session(sim) as bias:
            assert bias.output_on() is False and abs(bias.voltage()) < TOL
            assert bias.interlock_closed() is False
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert line.startswith("aborted: ") and "interlock" in line and "UNSAFE" not in line, line
    paths = completed_paths(db)  # stopped during the 10 s soak, not at its end
    assert "up" in paths and "soak" not in paths, paths
    assert_off_at_zero(state)
    run, events = the_run(db)
    assert run.status == "aborted" and "interlock" in run.reason
    k = kinds(events)
    opened = [e for e in events if e.kind == "interlock" and e.detail["closed"] is False]
    assert opened and k.index("ramp_end") < k.index("interlock", k.index("ramp_end"))
    assert "safe_state" in k and "unsafe" not in k


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT], ids=["SIGTERM", "SIGINT"])
def test_signal_while_live_ramps_down_and_verifies(tmp_path, sig):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    proc = write_procedure(tmp_path, soak_s=10.0)
    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        child = Child(run_args(proc, bench, db, "--yes"), tmp_path)
        try:
            with second_session(sim) as bias:
                wait_until_live(bias, 5.0, child)
                sent = time.monotonic()
                child.proc.send_signal(sig)
                seen = timed_watch(bias, child)
            done = child.wait()
        finally:
            child.kill()
        state = supply_state(sim)
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert line.startswith("aborted: ") and f"stopped by {sig.name}" in line, line
    assert "Traceback" not in done.stderr
    assert_off_at_zero(state)
    # ramped down at the permitted rate, not switched off from 5 V
    live = [(t, v) for t, on, v in seen if on]
    assert slope(live, 0.5, 4.5) == pytest.approx(-RATE, rel=0.15)
    off_at = next(t for t, on, _ in seen if not on)
    assert off_at - sent > 0.8  # 5 V at 5 V/s takes 1 s
    run, events = the_run(db)
    assert run.status == "aborted" and sig.name in run.reason
    k = kinds(events)
    stop = events[k.index("stop")]
    assert stop.detail["cause"] == "signal"
    down = [e.detail for e in events if e.kind == "ramp_start"][-1]
    assert down["to_V"] == 0.0 and down["rate_V_per_s"] == RATE
    assert k.index("stop") < k.index("ramp_end", k.index("stop")) < k.index("safe_state")
    assert "unsafe" not in k


def test_dropped_link_while_live_aborts_and_switches_off_through_a_reconnect(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    # the supply closes the run's connection once, 2 s after its first message (during the soak);
    # a new connection works
    board = write_board(tmp_path, faults=[{"kind": "disconnect", "role": "bias", "after_s": 2.0}])
    with sim_bench(tmp_path, board) as (sim, bench):
        done = run_cli(
            run_args(write_procedure(tmp_path, soak_s=10.0), bench, db, "--yes"), tmp_path
        )
        state = supply_state(sim)
        with second_session(sim) as bias:
            assert bias.output_on() is False and abs(bias.voltage()) < TOL
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert "bias at TCPIP0::127.0.0.1::" in line and "link to the supply dropped" in line, line
    assert "UNSAFE" not in line
    assert_off_at_zero(state)
    run, events = the_run(db)
    assert run.status == "aborted" and "link" in run.reason
    k = kinds(events)
    assert [e.detail["to_V"] for e in events if e.kind == "ramp_start"] == [5.0, 0.0]
    assert k[-1] == "safe_state" and "unsafe" not in k


def test_silent_supply_while_live_is_reported_unsafe(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    # from 2 s after its first message the supply reads commands but never runs or answers them
    board = write_board(tmp_path, faults=[{"kind": "no_reply", "role": "bias", "after_s": 2.0}])
    with sim_bench(tmp_path, board, bias_timeout_ms=300) as (sim, bench):
        done = run_cli(
            run_args(write_procedure(tmp_path, soak_s=10.0), bench, db, "--yes"), tmp_path
        )
        state = supply_state(sim)  # no client can read a silent supply: the simulator's own state
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert "no reply" in line and "UNSAFE: bias at TCPIP0::127.0.0.1::" in line, line
    assert "off by hand" in line
    # the truth behind the word: the supply never heard the ramp-down and is still live
    assert state["output"] is True and state["volts"] == pytest.approx(5.0)
    run, events = the_run(db)
    assert run.status == "aborted" and "UNSAFE" in run.reason
    k = kinds(events)
    assert "unsafe" in k and "safe_state" not in k


def test_over_current_trips_at_the_bench_limit_and_aborts(tmp_path):
    db = f"sqlite:///{tmp_path / 'results.db'}"
    # a 1 MOhm leakage path: I = V / R reaches the bench file's 2 uA at 2 V, during the ramp up
    board = write_board(tmp_path, bias_resistance_Mohm=1.0)
    proc = write_procedure(tmp_path, soak_s=0.3, limit_uA=None)
    with sim_bench(tmp_path, board, max_current_uA=2.0) as (sim, bench):
        done = run_cli(run_args(proc, bench, db, "--yes"), tmp_path)
        state = supply_state(sim)
    assert done.code == EXIT_ABORT, done
    line = last_line(done.stderr)
    assert line.startswith("aborted: ") and "over-current" in line, line
    assert_off_at_zero(state)
    assert state["limit_A"] == pytest.approx(2e-6)
    run, events = the_run(db)
    assert run.status == "aborted"
    k = kinds(events)
    assert events[k.index("current_limit")].detail["source"] == "bench file"
    assert "safe_state" in k and "unsafe" not in k
    # never above 2 V: the trip came on the way up (Ohm's law: 2 uA x 1 MOhm = 2 V), plus a little
    # for the ramp's progress between two read-backs
    readings = [e.detail["volts"] for e in events if e.kind == "reading"]
    assert max(readings) < 2.0 + RATE * 0.1


def test_a_results_database_failing_while_live_does_not_stop_the_ramp_down(tmp_path):
    # The engine's own runner over real sockets, with a subscriber that fails like a database
    # gone away (StoreError on every event) from the moment the bias is live: "on any error" the
    # bias must still reach 0 V with the output off, even though nothing can be recorded.
    plan = plan_for(load_procedure(write_procedure(tmp_path, soak_s=10.0)), SERIAL)
    seen: list[str] = []

    def dead_database(event) -> None:
        if "ramp_end" in seen:
            raise StoreError("cannot record: the results database went away")
        if isinstance(event, SafetyEvent):
            seen.append(event.kind)

    with sim_bench(tmp_path, write_board(tmp_path)) as (sim, bench):
        options = RunOptions(operator="test", unattended=True, handle_signals=False)
        with open_bench(load_bench(bench), roles=["bias"]) as instruments:
            runner = Runner(
                plan, instruments, run_id=1, subscribers=[dead_database], options=options
            )
            with pytest.raises(StoreError):  # the failure still reaches the caller, at the end
                runner.run()
            assert runner.stop.requested is False
        state = supply_state(sim)
    assert_off_at_zero(state)
    after = state["received"]
    on = max(i for i, m in enumerate(after) if m.startswith("OUTPut:STATe ON"))
    down = after.index(VOLT + " 0", on)
    off = after.index("OUTPut:STATe OFF", on)
    assert down < off  # ramped to 0 V first, then switched off
