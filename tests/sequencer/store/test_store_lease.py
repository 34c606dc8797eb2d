"""The run lease (issue 19 item 5): a unique token and a heartbeat.  Two PCs with one host name
never mark each other's live run interrupted; a run whose PC died turns interrupted once its
heartbeat is old; a take-over is explicit and recorded, and the old recorder loses its lease.

Another PC is played by rewriting the run's host/boot columns (not provenance; the 0002 guards
allow it while the run is not completed); states and counts are asserted, no wall-clock bounds.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from sequencer.errors import StoreError
from sequencer.store import Store
from sequencer.store.liveness import this_process

from .scenario import T0, run_info


def as_other_pc(store: Store, run_id: int, *, beat_age_s: float) -> None:
    """The run now looks recorded by another PC with the same host name (another boot id)."""
    me = this_process()
    with store.engine.begin() as conn:
        conn.execute(
            sa.text("UPDATE runs SET host = :h, pid = 1, process_tag = :t, heartbeat_at = :b WHERE id = :i"),
            {"h": me.host, "t": "another-boot-id:12345", "i": run_id,
             "b": datetime.now(UTC) - timedelta(seconds=beat_age_s)},
        )


@pytest.fixture
def store(sqlite_url):
    with Store.open(sqlite_url) as s:
        yield s


def test_a_live_run_of_another_pc_with_the_same_host_name_is_left_running(store):
    run_id = store.create_run(run_info(), datetime.now(UTC), lease_token="a" * 32)
    as_other_pc(store, run_id, beat_age_s=5)
    assert store.mark_stale_runs_interrupted() == []
    assert store.get_run(run_id).status == "running"
    with pytest.raises(StoreError, match=r"still running: .* gave a heartbeat .*--take-over"):
        store.reopen_run(run_id)


def test_a_run_whose_pc_died_turns_interrupted_by_its_heartbeat_age(store):
    run_id = store.create_run(run_info(), T0)
    as_other_pc(store, run_id, beat_age_s=600)
    assert store.mark_stale_runs_interrupted(stale_after_s=60) == [run_id]
    run = store.get_run(run_id)
    assert run.status == "interrupted" and "stopped giving a heartbeat" in run.reason
    store.reopen_run(run_id)  # resumable from anywhere now
    assert store.get_run(run_id).status == "running"


def test_same_host_and_boot_a_dead_process_is_judged_at_once(store):
    run_id = store.create_run(run_info(), datetime.now(UTC))
    me = this_process()
    with store.engine.begin() as conn:  # a pid that no process has (pid_max is at most 2**22)
        conn.execute(sa.text("UPDATE runs SET pid = :p WHERE id = :i"), {"p": 2**22 + 7, "i": run_id})
    assert me.tag == "" or store.mark_stale_runs_interrupted() == [run_id]


def test_take_over_is_explicit_recorded_and_the_old_recorder_loses_its_lease(store):
    run_id = store.create_run(run_info(), datetime.now(UTC), lease_token="old" + "0" * 29)
    as_other_pc(store, run_id, beat_age_s=1)
    assert store.beat(run_id, "old" + "0" * 29) is True  # its own token: the beat is taken
    store.reopen_run(run_id, lease_token="new" + "0" * 29, take_over=True)
    assert store.beat(run_id, "old" + "0" * 29) is False  # the old recorder learns it lost
    assert store.beat(run_id, "new" + "0" * 29) is True
    trail = store.audit_trail(run_id)
    assert trail[-1].kind == "resumed" and trail[-1].text.startswith("taken over from ")


def test_after_a_take_over_the_old_recorder_writes_nothing_over_the_new_owners_run(db_url):
    """Two recorders (two stores, as two processes would have) on one run: once the second took
    the run over, the first one's steps are refused and its final "aborted" is only noted beside
    the run; the new owner's steps and status are what the run keeps."""
    from sequencer.errors import LeaseLost

    from .scenario import finished, step_events

    with Store.open(db_url) as old, Store.open(db_url) as new:
        run_id = old.create_run(run_info(), datetime.now(UTC))
        for event in step_events(run_id, "steps/1", index=0):
            old.handle(event)
        new.reopen_run(run_id, take_over=True)  # same process: it looks live, so take over
        late = step_events(run_id, "steps/2", index=1)
        for event in late[:-1]:
            old.handle(event)  # buffered in memory only
        with pytest.raises(LeaseLost, match="taken over by another process"):
            old.handle(late[-1])
        old.handle(finished(run_id, "aborted", "stop requested"))  # no error: noted only
        assert new.get_run(run_id).status == "running"
        for event in step_events(run_id, "steps/2", index=1, seed=1):
            new.handle(event)
        new.handle(finished(run_id, "completed"))
        old.handle(finished(run_id, "aborted", "came back after the end"))  # still nothing
        run = new.get_run(run_id)
        assert run.status == "completed" and run.reason == ""
        assert [s.path for s in new.steps(run_id)] == ["steps/1", "steps/2"]
        noted = [a for a in new.audit_trail(run_id) if a.kind == "lease_lost"]
        assert [a.detail["status"] for a in noted] == ["aborted", "aborted"]
        assert [a.detail["run_status"] for a in noted] == ["running", "completed"]
        assert [a.kind for a in new.audit_trail(run_id)].count("finished") == 1
