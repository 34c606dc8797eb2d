"""A run SIGKILLed at random moments resumes every time to the full set of measurements, once each.

The real CLI in a child process (``python -m sequencer run ... --sim BOARD``: the simulated bench lives
inside that process and dies with it), killed with SIGKILL -- no handler, no cleanup, no last write
-- at a random moment after its run was recorded; then ``resume --sim BOARD`` in a new process.
Each step is one transaction (DESIGN.md data flow), so after any kill the steps in the database are
exactly a prefix of the plan, each capture with its trace.

The moments are drawn from a seeded generator; the seed is in every failure message, and
``BENCHWRIGHT_KILL_SEED`` replays a failing draw.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import time
from pathlib import Path

import pytest

from sequencer.compose import plan_for
from sequencer.procedure import load_procedure
from sequencer.store import Store
from tests.reliability import kit

SEED = int(os.environ.get("BENCHWRIGHT_KILL_SEED", "0")) or random.SystemRandom().randrange(
    1, 10**9
)
PLAN = plan_for(load_procedure(kit.PROCEDURE), "NR-PA8-0001")
MAIN_PATHS = [s.path for s in PLAN.steps if s.block != "cleanup"]
CAPTURE_PATHS = {s.path for s in PLAN.steps if s.kind == "scope.capture"}
START_WAIT_S = 60.0  # interpreter start and imports on a busy 2-core machine
POLL_S = 0.01


def run_started(store: Store, pid: int) -> int | None:
    """The id of the run the process ``pid`` is executing (recorded with its host and pid)."""
    for record in store.list_runs():
        if record.pid == pid and record.status == "running":
            return record.id
    return None


def start_and_kill(url: str, args: list[str], cwd: Path, delay_s: float) -> tuple[int | None, int]:
    """Start ``benchwright ARGS``; ``delay_s`` after its run is recorded running, SIGKILL it.

    Returns (run id or None, return code: -SIGKILL when the kill landed, else the CLI's own).
    """
    child = subprocess.Popen(
        kit.cli_command(*args),
        cwd=cwd,
        env=kit.cli_env(),
        stdin=subprocess.DEVNULL,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    run_id = None
    try:
        with Store.open(url) as store:
            deadline = time.monotonic() + START_WAIT_S
            while run_id is None and child.poll() is None and time.monotonic() < deadline:
                run_id = run_started(store, child.pid)
                time.sleep(POLL_S)
        if run_id is not None:
            time.sleep(delay_s)
            child.send_signal(signal.SIGKILL)
        _, err = child.communicate(timeout=kit.CLI_TIMEOUT_S)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait(timeout=10)
    assert kit.no_traceback(err), err
    return run_id, child.returncode


def check_prefix(url: str, run_id: int, why: str) -> None:
    """The completed steps are a prefix of the plan (plus cleanup steps), captures with traces."""
    with Store.open(url) as store:
        done = store.completed_steps(run_id)
    main = [p for p in MAIN_PATHS if p in done]
    assert main == MAIN_PATHS[: len(main)], why
    for path in CAPTURE_PATHS & set(done):
        assert [t.volts.size for t in done[path].traces] == [500], (why, path)


def run_duration(tmp_path: Path) -> float:
    """Wall time of one uninterrupted run (from its record), to draw kill moments within it."""
    url = f"sqlite:///{tmp_path / 'reference.db'}"
    done = kit.run_cli(*kit.run_args(url, sim=kit.EXAMPLE_BOARD), cwd=tmp_path)
    assert done.returncode == kit.EXIT_OK, done.stderr
    run_id = kit.run_id_of(done.stdout)
    assert run_id is not None, done.stdout
    kit.check_values(url, run_id)
    with Store.open(url) as store:
        record = store.get_run(run_id)
    return (record.ended_at - record.started_at).total_seconds()


def kill_and_resume(tmp_path: Path, index: int, delay_s: float) -> str:
    """One moment: kill a fresh run ``delay_s`` into it, resume it, check it; returns what happened."""
    why = f"seed {SEED}, moment {index}: kill {delay_s:.3f} s after the run started"
    url = f"sqlite:///{tmp_path / f'killed-{index}.db'}"
    run_id, code = start_and_kill(url, kit.run_args(url, sim=kit.EXAMPLE_BOARD), tmp_path, delay_s)
    assert run_id is not None, f"{why}: the run never started (exit {code})"
    if code != -signal.SIGKILL:  # the run ended before the kill landed
        assert code == kit.EXIT_OK, why
        kit.check_values(url, run_id)
        return "ended before the kill"
    check_prefix(url, run_id, why)
    with Store.open(url) as store:
        status = store.get_run(run_id).status
    if status != "completed":  # killed after its last record: nothing left to resume
        again = kit.run_cli(*kit.resume_args(url, run_id, sim=kit.EXAMPLE_BOARD), cwd=tmp_path)
        assert again.returncode == kit.EXIT_OK, f"{why}: {again.stderr}"
        assert kit.no_traceback(again.stdout, again.stderr), why
        with Store.open(url) as store:
            assert store.get_run(run_id).status == "completed", why
    kit.check_values(url, run_id)
    return "killed and resumed"


def draw_moments(count: int, duration_s: float) -> list[float]:
    rng = random.Random(SEED)
    return sorted(rng.uniform(0.0, duration_s) for _ in range(count))


def test_kills_at_random_moments_quick(tmp_path: Path) -> None:
    duration = run_duration(tmp_path)
    outcomes = [kill_and_resume(tmp_path, i, d) for i, d in enumerate(draw_moments(3, duration))]
    assert "killed and resumed" in outcomes, f"seed {SEED}: no kill landed ({outcomes})"


@pytest.mark.slow
def test_ten_kills_at_random_moments(tmp_path: Path) -> None:
    duration = run_duration(tmp_path)
    outcomes = [kill_and_resume(tmp_path, i, d) for i, d in enumerate(draw_moments(10, duration))]
    assert outcomes.count("killed and resumed") >= 8, f"seed {SEED}: {outcomes}"


@pytest.mark.slow
def test_resume_killed_again_and_again(tmp_path: Path) -> None:
    """One run killed, its resume killed at a random moment three times, then resumed to the end."""
    duration = run_duration(tmp_path)
    url = f"sqlite:///{tmp_path / 'chain.db'}"
    rng = random.Random(SEED + 1)
    run_id, code = start_and_kill(
        url, kit.run_args(url, sim=kit.EXAMPLE_BOARD), tmp_path, rng.uniform(0.0, duration)
    )
    assert run_id is not None and code == -signal.SIGKILL, f"seed {SEED}: exit {code}"
    for k in range(3):
        why = f"seed {SEED}, resume {k}"
        check_prefix(url, run_id, why)
        with Store.open(url) as store:
            if store.get_run(run_id).status == "completed":  # the kill landed after the end
                break
        args = kit.resume_args(url, run_id, sim=kit.EXAMPLE_BOARD)
        again, code = start_and_kill(url, args, tmp_path, rng.uniform(0.0, duration))
        assert again in (run_id, None), why
        if code == kit.EXIT_OK:
            break
    else:
        with Store.open(url) as store:
            finished = store.get_run(run_id).status == "completed"
        if not finished:  # a kill can land after the run was recorded completed, before exit
            final = kit.run_cli(*kit.resume_args(url, run_id, sim=kit.EXAMPLE_BOARD), cwd=tmp_path)
            assert final.returncode == kit.EXIT_OK, final.stderr
    kit.check_values(url, run_id)
