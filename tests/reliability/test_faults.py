"""Every fault the simulator can inject, at several points of a run, through the real CLI.

What the design promises (DESIGN.md "Exit codes", drivers/scpi/session.py "recovery"):

* a fault the drivers cannot hide ends the run with exit 3 and one clear line naming the cause; the
  bias is made safe (output off, 0 V, read back here through a second session); the run is recorded
  ``aborted`` with that reason; every step completed before the fault is in the database, with its
  traces; and ``resume`` on the same board file without the fault completes the run to exactly the
  full set of measurements;
* a fault the drivers may hide (one garbled reply, one dropped link: idempotent queries and settings
  are retried after a resynchronisation / reconnection) either does so -- the run completes with
  correct values -- or aborts as above.  Never a wrong value stored, never a traceback.

The CLI runs in this process (click's runner: exit code, stdout and stderr as a user sees them;
exceptions not caught) -- the subprocess CLI is exercised by test_kills and test_concurrency.  The
simulated bench runs here too (``--bench``) so the supply can be watched after the run ends;
``resume`` runs on ``--sim`` (the simulator the CLI starts) with the fault removed.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from drivers.sim import load_board, start_sim_bench
from sequencer.compose import plan_for
from sequencer.procedure import load_procedure
from sequencer.store import Store
from tests.reliability import kit

#: Short link timeout in the bench file: a silent instrument costs ~2 timeouts, not ~2 x 5 s.
TIMEOUT_MS = 1000
#: The scope receives 24 messages in a run of kit.PROCEDURE (counted on the simulator): *IDN?, two
#: set-up messages at open, four settings (each joined with its error query, drivers/scpi/messages.py),
#: then per capture x 8: start (+ *OPC? + error query, one message), the preamble for the first
#: capture only (the driver keeps it while no write of ours changed it), data.  Capture k >= 2 starts
#: at message 11 + 2 (k - 2).  ``after_commands: N`` acts on message N + 1.  Early: a setting;
#: mid: the third capture's start (an action); late: the seventh capture's data (a query).
SCOPE_EARLY, SCOPE_MID, SCOPE_LATE = 6, 12, 21
#: The sixth capture's start (message 19): a start is never re-sent, so a dropped link there aborts.
SCOPE_CAPTURE_START = 18
ALWAYS_ABORTS = {"no_reply", "scpi_error", "interlock_open"}
#: What the one-line cause must say, per fault kind (a pattern of the drivers' and engine's wording).
CAUSE = {
    "no_reply": "no reply",
    "scpi_error": "-310",
    "interlock_open": "interlock",
    "garbled_reply": "garbled",
    "disconnect": r"connection closed by the instrument|link to the supply dropped while live",
}
PLAN = plan_for(load_procedure(kit.PROCEDURE), "NR-PA8-0001")
MAIN_PATHS = [s.path for s in PLAN.steps if s.block != "cleanup"]
CAPTURE_PATHS = {s.path for s in PLAN.steps if s.kind == "scope.capture"}


def scope_fault(kind: str, after: int) -> dict:
    fault = {"kind": kind, "role": "scope", "after_commands": after}
    if kind == "scpi_error":
        fault["code"] = -310
    return fault


QUICK = [
    scope_fault("no_reply", SCOPE_MID),
    scope_fault("disconnect", SCOPE_CAPTURE_START),  # an action, never re-sent -> abort
    scope_fault("garbled_reply", SCOPE_MID),
    scope_fault("garbled_reply", 0),  # the *IDN? reply at opening: never taken for the identity
    scope_fault("scpi_error", SCOPE_MID),
    {"kind": "interlock_open", "role": "bias", "after_s": 0.05},
]
MORE = [
    scope_fault("no_reply", SCOPE_EARLY),
    scope_fault("no_reply", SCOPE_LATE),
    scope_fault("disconnect", SCOPE_EARLY),  # a query or setting: recovered
    scope_fault("disconnect", SCOPE_MID),
    scope_fault("disconnect", SCOPE_LATE),
    scope_fault("garbled_reply", SCOPE_EARLY),
    scope_fault("garbled_reply", SCOPE_LATE),
    scope_fault("scpi_error", SCOPE_EARLY),
    scope_fault("scpi_error", SCOPE_LATE),
    {"kind": "interlock_open", "role": "bias", "after_s": 0.3},
    {"kind": "disconnect", "role": "bias", "after_commands": 20},  # while the bias is live
    {"kind": "garbled_reply", "role": "bias", "after_commands": 20},
]


def label(fault: dict) -> str:
    at = fault.get("after_commands", fault.get("after_s"))
    return f"{fault['kind']}-{fault['role']}-{at}"


def check_identities(url: str, run_id: int, truth: dict[str, str]) -> None:
    """The recorded identity of every opened instrument is the instrument's real one."""
    with Store.open(url) as store:
        recorded = {i.role: i for i in store.get_run(run_id).instruments if i.maker}
    assert recorded, "no identity recorded"
    for role, info in recorded.items():
        assert f"{info.maker},{info.model}" == truth[role], (role, info)


def check_abort(url: str, run_id: int, stderr: str, kind: str) -> None:
    line = stderr.strip().splitlines()[-1]
    assert line.startswith("aborted: "), stderr
    assert re.search(CAUSE[kind], line), line
    reason = line.removeprefix("aborted: ")
    with Store.open(url) as store:
        record = store.get_run(run_id)
        done = store.completed_steps(run_id)
    assert record.status == "aborted" and record.reason == reason, (record.status, record.reason)
    m = re.search(r"\[step (?P<path>[^\]]+)\]", reason)
    assert m, f"the cause names no step: {reason}"
    failed = MAIN_PATHS.index(m["path"])
    before = set(MAIN_PATHS[:failed])
    assert before <= set(done), sorted(before - set(done))  # every step completed before it
    assert m["path"] not in done and not set(MAIN_PATHS[failed + 1 :]) & set(done)
    for path in before & CAPTURE_PATHS:  # with its trace
        assert [t.volts.size for t in done[path].traces] == [500], path


def run_with_fault(tmp_path: Path, fault: dict) -> None:
    board = kit.write_board(tmp_path, faults=[fault])
    url = f"sqlite:///{tmp_path / 'results.db'}"
    with start_sim_bench(load_board(board)) as sim:
        truth = {
            role: f"{entry['expect_id']}"
            for role, entry in sim.bench_mapping()["instruments"].items()
        }
        bench = kit.write_bench(sim, tmp_path, timeout_ms=TIMEOUT_MS)
        code, out, err = kit.invoke(*kit.run_args(url, bench=bench))
        on, volts = kit.bias_state(sim)
    assert kit.no_traceback(out, err), err
    assert on is False and abs(volts) < 0.1, (on, volts)  # the bias safe, whatever happened
    run_id = kit.last_run_id(url)
    check_identities(url, run_id, truth)
    if code == kit.EXIT_OK:  # recovered by the drivers: the values must be right
        assert fault["kind"] not in ALWAYS_ABORTS, out
        kit.check_values(url, run_id)
        return
    assert code == kit.EXIT_ABORT, (code, err)
    check_abort(url, run_id, err, fault["kind"])
    clean = kit.write_board(tmp_path, name="without-fault.yaml")
    code, out, err = kit.invoke(*kit.resume_args(url, run_id, sim=clean))
    assert code == kit.EXIT_OK, err
    assert kit.no_traceback(out, err)
    with Store.open(url) as store:
        assert store.get_run(run_id).status == "completed"
    kit.check_values(url, run_id)


@pytest.mark.parametrize("fault", QUICK, ids=label)
def test_fault_aborts_cleanly_or_is_recovered(tmp_path: Path, fault: dict) -> None:
    run_with_fault(tmp_path, fault)


@pytest.mark.slow
@pytest.mark.parametrize("fault", MORE, ids=label)
def test_fault_at_more_points(tmp_path: Path, fault: dict) -> None:
    run_with_fault(tmp_path, fault)
