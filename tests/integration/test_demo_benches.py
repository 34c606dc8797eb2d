"""The demo's benches at work together (sequencer/demo/benches.py, bench_process.py): one process
per bench, one shared SQLite database, progress prefixed per bench, and a stop that brings every
bias down.

What is checked, without wall-clock bounds (orders, counts, states):

* two benches given a small bias batch each run their boards in one database, each run recorded
  with its bench's name, the two benches' runs overlapping in time (one started before the other
  ended: concurrent, not one after the other), every progress line carrying its bench's label;
* the messages between a bench and the demo survive the round trip (a batch outcome rebuilt equal);
  a bench that can no longer write (the demo gone) does not raise into its run;
* ``benchwright demo`` stopped by SIGINT to its process group (what Ctrl-C in a terminal sends)
  while a bias is live: exit 3, no run left running, every run that switched a bias on recorded
  its safe state with the output off at 0 V (within the engine's ramp tolerance), no bench process
  left; killed outright (SIGKILL, no chance to pass anything on), its benches see it gone and stop
  their runs the same way.
"""

from __future__ import annotations

import dataclasses
import io
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from sequencer.batchrun import BatchOutcome, BoardOutcome
from sequencer.demo.bench_process import Channel
from sequencer.demo.benches import Bench, outcome_from, run_benches
from sequencer.store import Store
from tests.integration.safety_cli import BOARD, write_procedure

ROOT = Path(__file__).resolve().parents[2]
RAMP_TOLERANCE_V = 0.1  # RunOptions.ramp_tolerance_V's default (sequencer/engine/records.py)
DEADLINE_S = 300.0  # loops in these tests give up here (a loaded machine), never a speed check


def _small_batch(folder: Path, name: str, serials: list[str]) -> Path:
    """A batch of ``serials`` on copies of the example PA8 board, each a 2 V bias ramp at 2 V/s up
    and down (one second each way: real time, as every ramp)."""
    folder.mkdir(parents=True)
    procedure = write_procedure(folder, volts=2.0, rate=2.0, soak_s=0.2)
    data = yaml.safe_load(BOARD.read_text(encoding="utf-8"))
    for serial in serials:
        (folder / f"{serial}.yaml").write_text(
            yaml.safe_dump({**data, "serial": serial}, sort_keys=False), encoding="utf-8"
        )
    path = folder / "batch.yaml"
    path.write_text(
        f"batch: {name}\nprocedure: {procedure}\nboard_type: PA8\noperator: T. Tester\n"
        "boards:\n" + "".join(f"  - serial: {s}\n" for s in serials),
        encoding="utf-8",
    )
    return path


def test_two_benches_run_at_once_into_one_database(tmp_path):
    a = _small_batch(tmp_path / "a", "NR-TEST-A", ["NR-PA8-A1", "NR-PA8-A2"])
    b = _small_batch(tmp_path / "b", "NR-TEST-B", ["NR-PA8-B1", "NR-PA8-B2"])
    url = f"sqlite:///{tmp_path / 'results.db'}"
    Store.open(url, wait_for_disk=False).close()  # the schema first, as the demo does
    lines: list[str] = []
    boards: list[tuple[str, BoardOutcome]] = []
    done: list[str] = []
    benches = [Bench(name="bench-a", batch_file=str(a), label="A"),
               Bench(name="bench-b", batch_file=str(b), label="B")]
    run_benches(benches, url, echo=lines.append,
                on_board=lambda bench, board: boards.append((bench.name, board)),
                on_done=lambda bench: done.append(bench.name))
    assert sorted(done) == ["bench-a", "bench-b"]
    assert [bench.outcome.batch for bench in benches] == ["NR-TEST-A", "NR-TEST-B"]
    assert all(o.status == "passed" for bench in benches for o in bench.outcome.boards)
    assert len(boards) == 4
    assert lines and all(line.startswith(("A | ", "B | ")) for line in lines)
    assert sum("[2/2]" in line for line in lines) == 2
    with Store.open(url, create=False) as store:
        runs = store.list_runs()
    assert sorted((r.bench, r.board) for r in runs) == [
        ("bench-a", "NR-PA8-A1"), ("bench-a", "NR-PA8-A2"),
        ("bench-b", "NR-PA8-B1"), ("bench-b", "NR-PA8-B2"),
    ]
    assert all(r.status == "completed" for r in runs)
    spans = {bench: (min(r.started_at for r in runs if r.bench == bench),
                     max(r.ended_at for r in runs if r.bench == bench))
             for bench in ("bench-a", "bench-b")}
    (a0, a1), (b0, b1) = spans["bench-a"], spans["bench-b"]
    assert a0 < b1 and b0 < a1  # the two benches' runs overlap: they ran at once


def test_a_batch_outcome_survives_the_message_round_trip():
    outcome = BatchOutcome(batch="NR-X", stopped=True, boards=(
        BoardOutcome(serial="S1", status="failed", run_id=3, channels=8, passed=7, note="n"),
        BoardOutcome(serial="S2", status="not run"),
    ))
    out = io.StringIO()
    Channel(out).send("outcome", dataclasses.asdict(outcome))
    (line,) = out.getvalue().splitlines()
    assert outcome_from(json.loads(line)["outcome"]) == outcome


def test_a_bench_whose_demo_is_gone_writes_without_raising():
    closed = io.StringIO()
    closed.close()
    Channel(closed).send("line", "nobody listens")  # no exception into the run
    with pytest.raises(ValueError):
        Channel(io.StringIO()).send("nonsense", 1)


# -- the real command, stopped ------------------------------------------------------------------
def _live_run(db: Path) -> bool:
    """A run has switched a bias output on and not yet off (read-only look at the demo's store)."""
    if not db.exists():
        return False
    try:
        with sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5) as conn:
            rows = conn.execute(
                "SELECT run_id, detail FROM safety_events WHERE kind = 'output' ORDER BY id"
            ).fetchall()
    except sqlite3.Error:  # not created yet
        return False
    last: dict[int, bool] = {}
    for run_id, detail in rows:
        last[run_id] = bool(json.loads(detail).get("on"))
    return any(last.values())


def _bench_processes(out: Path, demo: int) -> list[int]:
    """Pids of bench processes of the demo ``demo`` writing into ``out``: a bench forked from the
    demo has the demo's command line (``--out`` names the folder), a bench started afresh names
    the database in its own; the demo itself is not one."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit() or int(entry.name) == demo:
            continue
        try:
            cmd = (entry / "cmdline").read_bytes().decode(errors="replace")
            state = (entry / "stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if str(out) in cmd and state != "Z":  # a zombie has ended (its parent reaps it)
            found.append(int(entry.name))
    return found


def _start_demo(out: Path) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "sequencer", "demo", "--out", str(out)],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
        start_new_session=True,  # its own process group, as a command started in a terminal
    )


def _wait_for(condition, what: str) -> None:
    deadline = time.monotonic() + DEADLINE_S
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"gave up waiting for {what}")
        time.sleep(0.1)


def _assert_every_bias_safe(db: Path) -> None:
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as conn:
        statuses = dict(conn.execute("SELECT id, status FROM runs").fetchall())
        switched_on = {r for (r,) in conn.execute(
            "SELECT DISTINCT run_id FROM safety_events WHERE kind = 'output' "
            "AND json_extract(detail, '$.on') = 1")}
        safe = {}
        for run_id, detail in conn.execute(
            "SELECT run_id, detail FROM safety_events WHERE kind = 'safe_state' ORDER BY id"
        ):
            safe[run_id] = json.loads(detail)  # the last one of each run
    assert statuses and "running" not in statuses.values()
    assert "aborted" in statuses.values()
    assert switched_on  # the stop came while a bias was live
    for run_id in switched_on:
        assert safe[run_id]["output"] is False
        assert abs(safe[run_id]["volts"]) <= RAMP_TOLERANCE_V


@pytest.mark.slow
def test_ctrl_c_brings_every_bias_to_zero_and_ends_every_bench(tmp_path):
    out = tmp_path / "demo"
    demo = _start_demo(out)
    try:
        _wait_for(lambda: _live_run(out / "results.db") or demo.poll() is not None, "a live bias")
        assert demo.poll() is None, demo.communicate()[0]
        os.killpg(demo.pid, signal.SIGINT)  # what Ctrl-C in the terminal sends
        output, _ = demo.communicate(timeout=DEADLINE_S)
    finally:
        if demo.poll() is None:
            demo.kill()
    assert demo.returncode == 3, output
    assert "stopped by SIGINT" in output and "Traceback" not in output
    assert _bench_processes(out, demo.pid) == []
    _assert_every_bias_safe(out / "results.db")


@pytest.mark.slow
def test_benches_stop_safely_when_the_demo_is_killed(tmp_path):
    out = tmp_path / "demo"
    demo = _start_demo(out)
    try:
        _wait_for(lambda: _live_run(out / "results.db") or demo.poll() is not None, "a live bias")
        assert demo.poll() is None, demo.communicate()[0]
        demo.kill()  # SIGKILL: nothing is passed on; the benches must notice by themselves
        demo.communicate(timeout=DEADLINE_S)
        _wait_for(lambda: not _bench_processes(out, demo.pid), "the bench processes to end")
    finally:
        if demo.poll() is None:
            demo.kill()
    _assert_every_bias_safe(out / "results.db")


@pytest.mark.slow
def test_ctrl_c_while_the_benches_start_ends_quietly(tmp_path):
    out = tmp_path / "demo"
    demo = _start_demo(out)
    try:
        # the bench processes exist: they are starting (importing, opening the store)
        _wait_for(lambda: _bench_processes(out, demo.pid) or demo.poll() is not None,
                  "the benches")
        assert demo.poll() is None, demo.communicate()[0]
        os.killpg(demo.pid, signal.SIGINT)
        output, _ = demo.communicate(timeout=DEADLINE_S)
    finally:
        if demo.poll() is None:
            demo.kill()
    assert demo.returncode == 3, output
    assert "stopped by SIGINT" in output and "Traceback" not in output
    assert _bench_processes(out, demo.pid) == []
    with sqlite3.connect(f"file:{out / 'results.db'}?mode=ro", uri=True) as conn:
        statuses = [s for (s,) in conn.execute("SELECT status FROM runs")]
    assert "running" not in statuses
