"""Interrupted runs, resume, notes, and the liveness of the recording process."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from sequencer.errors import StoreError
from sequencer.store.liveness import process_alive, process_tag, this_process

from .scenario import T0, finished, run_info, step_events

WRITER = Path(__file__).with_name("writer_proc.py")


def _dead_writer_run(url: str, steps: int) -> int:
    """A run left 'running' by a process that has exited: writes ``steps`` steps, then hangs; killed."""
    proc = subprocess.Popen(
        [
            sys.executable,
            str(WRITER),
            url,
            "0100",
            "--steps",
            "50",
            "--per-step",
            "2",
            "--hang-after",
            str(steps),
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        line = proc.stdout.readline().split()
        assert line[0] == "hang", line
    finally:
        proc.kill()
        proc.wait(timeout=10)
    return int(line[1])


def test_a_running_run_of_a_dead_process_is_marked_interrupted(db_url, store):
    dead = _dead_writer_run(db_url, steps=2)
    alive = store.create_run(run_info(), T0)  # ours: this process is alive
    assert store.mark_stale_runs_interrupted() == [dead]
    assert store.mark_stale_runs_interrupted() == []
    run = store.get_run(dead)
    assert run.status == "interrupted"
    assert run.ended_at == max(s.finished_at for s in store.steps(dead))  # the last known moment
    assert store.get_run(alive).status == "running"
    assert [a.kind for a in store.audit_trail(dead)] == ["interrupted"]
    assert sorted(store.completed_steps(dead)) == ["scan/0", "scan/1"]


def test_resume_reopens_an_aborted_run_with_an_audit_entry(store):
    run_id = store.create_run(run_info(), T0)
    for e in step_events(run_id, "scan/0"):
        store.handle(e)
    store.handle(finished(run_id, "aborted", "operator stop"))
    store.reopen_run(run_id)
    run = store.get_run(run_id)
    assert (run.status, run.ended_at, run.reason, run.pid) == ("running", None, "", os.getpid())
    resumed = store.audit_trail(run_id)[-1]
    assert (resumed.kind, resumed.detail["from"], resumed.detail["previous_reason"]) == (
        "resumed", "aborted", "operator stop",
    )  # fmt: skip
    for e in step_events(run_id, "scan/1"):
        store.handle(e)
    store.handle(finished(run_id))
    assert store.get_run(run_id).status == "completed"
    assert sorted(store.completed_steps(run_id)) == ["scan/0", "scan/1"]
    assert [a.kind for a in store.audit_trail(run_id)] == ["finished", "resumed", "finished"]


def test_resume_of_a_run_whose_process_is_alive_is_refused(store):
    run_id = store.create_run(run_info(), T0)
    with pytest.raises(StoreError, match="still running"):
        store.reopen_run(run_id)


def test_resume_of_a_running_run_whose_process_died(db_url, store):
    dead = _dead_writer_run(db_url, steps=1)
    store.reopen_run(dead)  # no need to mark it interrupted first
    assert store.get_run(dead).status == "running"
    assert store.audit_trail(dead)[-1].detail["from"] == "running"


def test_finishing_a_run_that_is_not_running_is_refused(store):
    run_id = store.create_run(run_info(), T0)
    store.handle(finished(run_id, "interrupted", "SIGTERM"))
    with pytest.raises(StoreError, match="not running"):
        store.handle(finished(run_id))
    with pytest.raises(StoreError, match="cannot finish as 'running'"):
        store.handle(finished(run_id, "running"))


def test_missing_runs_are_a_store_error(store):
    for call in (
        lambda: store.get_run(404),
        lambda: store.reopen_run(404),
        lambda: store.add_note(404, "x", "y"),
    ):
        with pytest.raises(StoreError, match="no run 404"):
            call()


def test_notes_are_additions_in_order(store):
    run_id = store.create_run(run_info(), T0)
    store.add_note(run_id, "cable 3 replaced", "k.berg")
    store.add_note(run_id, "re-seated the board", "i.lindqvist")
    notes = store.notes(run_id)
    assert [(n.text, n.author, n.kind) for n in notes] == [
        ("cable 3 replaced", "k.berg", "note"), ("re-seated the board", "i.lindqvist", "note"),
    ]  # fmt: skip
    assert notes[0].at <= notes[1].at


def test_process_identity_and_liveness():
    me = this_process()
    assert me.pid == os.getpid()
    assert process_alive(me.pid, me.tag)
    assert not process_alive(me.pid, "another-boot:123")  # same pid, other process: reused pid
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait(timeout=10)
    assert not process_alive(child.pid, "")


def test_process_tag_reads_start_time_after_a_command_name_with_spaces(tmp_path):
    # proc(5): /proc/PID/stat field 2 is "(comm)", field 22 is starttime in clock ticks
    (tmp_path / "sys/kernel/random").mkdir(parents=True)
    (tmp_path / "sys/kernel/random/boot_id").write_text("b00t\n")
    (tmp_path / "77").mkdir()
    fields = ["77", "(my bench) x)", "S"] + [str(n) for n in range(4, 22)] + ["987654", "0", "0"]
    (tmp_path / "77/stat").write_text(" ".join(fields) + "\n")
    assert process_tag(77, tmp_path) == "b00t:987654"
    assert process_tag(78, tmp_path) == ""
