"""Several benches (processes) writing one database, and a writer killed with SIGKILL mid-run."""

from __future__ import annotations

import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import sqlalchemy as sa

from sequencer.store import Store
from sequencer.store.migrate import current_revisions, head_revision

WRITER = Path(__file__).with_name("writer_proc.py")
WAIT_S = 60.0


def _writer(url: str, label: str, *args: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, str(WRITER), url, label, *args], stdout=subprocess.PIPE, text=True
    )


def _count(conn: sa.Connection, sql: str) -> int:
    return conn.execute(sa.text(sql)).scalar_one()


@pytest.mark.parametrize("writers", [4])
def test_concurrent_writers_lose_no_row(db_url, tmp_path, writers):
    runs, steps, per_step = 2, 12, 25
    go = tmp_path / "go"
    args = (
        "--runs",
        str(runs),
        "--steps",
        str(steps),
        "--per-step",
        str(per_step),
        "--go",
        str(go),
    )
    procs = [_writer(db_url, f"{k:04d}", *args) for k in range(writers)]
    try:
        deadline = time.monotonic() + WAIT_S
        while len(list(tmp_path.glob("go.*.ready"))) < writers:
            assert time.monotonic() < deadline and all(p.poll() is None for p in procs)
            time.sleep(0.02)
        go.touch()  # all start together, on a database nobody has created yet
        outs = [p.communicate(timeout=WAIT_S)[0].split() for p in procs]
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
                p.wait(timeout=10)
    assert [p.returncode for p in procs] == [0] * writers
    spans = [(float(o[1]), float(o[2])) for o in outs]
    # they really wrote at the same time: every writer started before any had finished
    assert max(start for start, _ in spans) < min(end for _, end in spans)
    with Store.open(db_url) as store, store.engine.connect() as conn:
        assert current_revisions(conn) == (head_revision(),)  # migrated once, by one of them
        assert (
            _count(conn, "SELECT count(*) FROM runs WHERE status = 'completed'") == writers * runs
        )
        assert _count(conn, "SELECT count(*) FROM steps") == writers * runs * steps
        assert (
            _count(conn, "SELECT count(*) FROM measurements") == writers * runs * steps * per_step
        )
        assert _count(conn, "SELECT count(*) FROM traces") == writers * runs * steps
        assert _count(conn, "SELECT count(*) FROM safety_events") == writers * runs * steps
        boards = {r.board for r in store.list_runs()}
        assert boards == {f"NR-PA8-{k:04d}" for k in range(writers)}
        if conn.dialect.name == "sqlite":
            assert conn.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"


def _completed_steps_visible(url: str) -> int:
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            if not sa.inspect(conn).has_table("steps"):
                return 0
            return _count(conn, "SELECT count(*) FROM steps WHERE status = 'completed'")
    finally:
        engine.dispose()


def test_a_writer_killed_mid_run_leaves_a_consistent_record(db_url):
    per_step = 40
    proc = _writer(
        db_url, "0666", "--steps", "0", "--per-step", str(per_step)
    )  # writes until killed
    try:
        deadline = time.monotonic() + WAIT_S
        while _completed_steps_visible(db_url) < 3:
            assert proc.poll() is None, "the writer ended early"
            assert time.monotonic() < deadline, "the writer wrote nothing"
            time.sleep(0.05)
        time.sleep(random.uniform(0.0, 0.2))  # anywhere: inside a step's transaction or between
        proc.send_signal(signal.SIGKILL)
        assert proc.wait(timeout=10) == -signal.SIGKILL
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=10)
    with Store.open(db_url) as store:
        with store.engine.connect() as conn:
            if conn.dialect.name == "sqlite":
                assert conn.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
            per = conn.execute(
                sa.text(
                    "SELECT s.path, (SELECT count(*) FROM measurements m WHERE m.step_id = s.id),"
                    " (SELECT count(*) FROM traces t WHERE t.step_id = s.id) FROM steps s ORDER BY s.id"
                )
            ).all()
        [run] = store.list_runs()
        assert run.status == "running"
        n = len(per)
        assert n >= 3
        # every step is all or nothing, and the steps are exactly the first n of the plan
        assert per == [(f"scan/{k}", per_step, 1) for k in range(n)]
        assert store.mark_stale_runs_interrupted() == [run.id]
        done = store.completed_steps(run.id)
        assert sorted(done, key=lambda p: int(p.split("/")[1])) == [f"scan/{k}" for k in range(n)]
        assert all(len(s.measurements) == per_step and len(s.traces) == 1 for s in done.values())
        store.reopen_run(run.id)  # the engine resumes from here
        assert store.get_run(run.id).status == "running"
