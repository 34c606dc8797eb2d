"""Four benches writing one results database at once lose no row: SQLite (one file) and PostgreSQL.

Four ``python -m sequencer run`` processes start together, each on its own simulated board (own
serial, simulator inside the process), all with the same ``--db``.  Afterwards the database holds
exactly four completed runs, one per serial, each with every step of the plan, every trace and
exactly the seven measurements of a run -- none lost, none written twice, none in the wrong run.

PostgreSQL: the server at ``BENCHWRIGHT_TEST_PG_URL`` (skipped with the reason when unset), in a
fresh schema selected through libpq's ``options=-csearch_path=...`` and dropped afterwards.
"""

from __future__ import annotations

import os
import subprocess
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
import sqlalchemy as sa

from sequencer.compose import plan_for
from sequencer.procedure import load_procedure
from sequencer.store import Store
from tests.reliability import kit

PG_ENV = "BENCHWRIGHT_TEST_PG_URL"
BENCHES = 4
SERIALS = [f"NR-PA8-03{k + 1:02d}" for k in range(BENCHES)]
PLAN = plan_for(load_procedure(kit.PROCEDURE), SERIALS[0])
CAPTURES = sum(s.kind == "scope.capture" for s in PLAN.steps)


@pytest.fixture
def pg_url() -> Iterator[str]:
    base = os.environ.get(PG_ENV)
    if not base:
        pytest.skip(f"{PG_ENV} is not set: no PostgreSQL server to test against")
    admin = sa.create_engine(base, isolation_level="AUTOCOMMIT")
    schema = f"bw_reliability_{uuid.uuid4().hex[:10]}"
    try:
        with admin.connect() as conn:
            conn.execute(sa.text(f'CREATE SCHEMA "{schema}"'))
    except sa.exc.OperationalError as exc:
        admin.dispose()
        pytest.fail(f"{PG_ENV} is set but the server does not answer: {exc}")
    url = admin.url.update_query_dict({"options": f"-csearch_path={schema}"})
    try:
        yield url.render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP SCHEMA "{schema}" CASCADE'))
        admin.dispose()


def run_four_benches_at_once(url: str, folder: Path) -> None:
    boards = [kit.write_board(folder, serial=serial, name=f"{serial}.yaml") for serial in SERIALS]
    procs = [
        subprocess.Popen(
            kit.cli_command(*kit.run_args(url, sim=board)),
            cwd=folder,
            env=kit.cli_env(),
            stdin=subprocess.DEVNULL,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for board in boards
    ]
    try:
        outputs = [p.communicate(timeout=2 * kit.CLI_TIMEOUT_S) for p in procs]
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
                p.wait(timeout=10)
    for p, (out, err) in zip(procs, outputs, strict=True):
        assert p.returncode == kit.EXIT_OK, err
        assert kit.no_traceback(out, err)


def check_every_row(url: str) -> None:
    with Store.open(url) as store:
        runs = store.list_runs()
        assert sorted(r.board for r in runs) == SERIALS, [r.board for r in runs]
        assert len({r.id for r in runs}) == BENCHES
        for record in runs:
            assert record.status == "completed", (record.board, record.status, record.reason)
            done = store.completed_steps(record.id)
            assert sorted(done) == sorted(s.path for s in PLAN.steps), record.board
            traces = sum(len(step.traces) for step in done.values())
            assert traces == CAPTURES, record.board
            measured = store.measurements(run_id=record.id)
            assert sorted(kit.keys_of(measured), key=str) == sorted(kit.EXPECTED_KEYS, key=str)
            assert {m.run_id for m in measured} == {record.id}
        every = store.measurements()
    assert len(every) == BENCHES * len(kit.EXPECTED_KEYS)  # no row lost, none extra


def test_four_benches_one_sqlite_file(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'lab.db'}"  # created by whichever bench comes first
    run_four_benches_at_once(url, tmp_path)
    check_every_row(url)


@pytest.mark.postgres
def test_four_benches_one_postgresql_database(tmp_path: Path, pg_url: str) -> None:
    run_four_benches_at_once(pg_url, tmp_path)
    check_every_row(pg_url)
