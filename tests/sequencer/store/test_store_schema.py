"""Schema creation, migrations and connection settings, on a real SQLite file and a real PostgreSQL."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest
import sqlalchemy as sa
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from sequencer.errors import StoreError
from sequencer.store import DEFAULT_URL, Store, default_url
from sequencer.store.connect import network_filesystem, open_engine
from sequencer.store.migrate import current_revisions, head_revision, known_revisions, upgrade_to
from sequencer.store.models import Base

from .scenario import PROCEDURE_TEXT, T0, finished, run_info, step_events


def test_default_url_from_environment():
    # DESIGN.md: default sqlite:///benchwright.db, BENCHWRIGHT_DB overrides it
    assert default_url({}) == DEFAULT_URL == "sqlite:///benchwright.db"
    assert default_url({"BENCHWRIGHT_DB": "postgresql+psycopg://lab/results"}) == (
        "postgresql+psycopg://lab/results"
    )
    assert default_url({"BENCHWRIGHT_DB": ""}) == DEFAULT_URL


def test_at_least_two_revisions_are_shipped_in_the_package():
    assert {"0001", "0002", "0003"} <= known_revisions()
    assert head_revision() not in ("0001", "0002")
    import sequencer.store

    assert (Path(sequencer.store.__file__).parent / "migrations" / "versions").is_dir()


def test_new_database_is_created_at_head_and_matches_the_models(store):
    with store.engine.connect() as conn:
        assert current_revisions(conn) == (head_revision(),)
        # alembic's autogenerate comparison: the migrations build exactly the ORM's tables
        diffs = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    assert diffs == []


def test_reopening_an_up_to_date_database_changes_nothing(db_url):
    with Store.open(db_url) as s:
        run_id = s.create_run(run_info(), T0)
    with Store.open(db_url) as s:
        assert s.get_run(run_id).board == "NR-PA8-0001"


def test_sqlite_connections_are_wal_with_foreign_keys_and_busy_timeout(sqlite_url):
    # SQLite documentation, PRAGMA journal_mode / foreign_keys / busy_timeout / synchronous (FULL = 2)
    with Store.open(sqlite_url) as s, s.engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 1000
        assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == 2


def test_foreign_keys_are_enforced_on_every_connection(sqlite_url):
    with Store.open(sqlite_url) as s:
        for _ in range(3):  # several pooled connections
            with pytest.raises(sa.exc.IntegrityError), s.engine.begin() as conn:
                conn.exec_driver_sql(
                    "INSERT INTO instruments (run_id, role, address, maker, model, serial, firmware,"
                    " calibration_due) VALUES (999, 'scope', '', '', '', '', '', '')"
                )


def _insert_revision_1_run(engine: sa.Engine) -> int:
    """A run with one step and one measurement written with the 0001 schema (raw SQL)."""
    with engine.begin() as conn:
        conn.execute(
            sa.text("INSERT INTO documents (sha256, text) VALUES ('d1', :t)"), {"t": PROCEDURE_TEXT}
        )
        conn.execute(
            sa.text(
                "INSERT INTO runs (procedure, procedure_version, procedure_sha256, procedure_path,"
                " procedure_doc, bench, bench_doc, board, board_type, batch, operator,"
                " software_version, parameters, repeat_of, status, reason, started_at, ended_at,"
                " host, pid) VALUES ('pa8-gain', '1.0', 'abc', 'p.yaml', 'd1', 'bench-1', NULL,"
                " 'NR-PA8-0009', 'PA8', 'NR-B01', 'op', '0.0.9', '{}', NULL, 'completed', '',"
                " :t, :t, 'oldhost', 1)"
            ),
            {"t": T0.replace(tzinfo=None)},
        )
        run_id = conn.execute(sa.text("SELECT max(id) FROM runs")).scalar_one()
        conn.execute(
            sa.text(
                "INSERT INTO steps (run_id, path, kind, position, status, started_at, finished_at,"
                " settings, results, error) VALUES (:r, 'scan/0', 'scan', 0, 'completed', :t, :t,"
                " '{}', '{}', '')"
            ),
            {"t": T0.replace(tzinfo=None), "r": run_id},
        )
        step_id = conn.execute(sa.text("SELECT max(id) FROM steps")).scalar_one()
        conn.execute(
            sa.text(
                "INSERT INTO measurements (run_id, step_id, quantity, value, uncertainty, unit,"
                " channel, output, aggressor, low, high, verdict) VALUES (:r, :s, 'gain', 1.0125,"
                " 0.002, 'V/V', 3, 'x5', NULL, 0.95, 1.05, 'pass')"
            ),
            {"r": run_id, "s": step_id},
        )
    return run_id


def test_upgrade_from_the_first_revision_keeps_the_data(db_url):
    engine = open_engine(db_url)
    try:
        upgrade_to(engine, "0001")
        with engine.connect() as conn:
            assert current_revisions(conn) == ("0001",)
            assert not sa.inspect(conn).has_table("annotations")
        old_id = _insert_revision_1_run(engine)
    finally:
        engine.dispose()
    with Store.open(db_url) as s:
        with s.engine.connect() as conn:
            assert current_revisions(conn) == (head_revision(),)
        run = s.get_run(old_id)
        assert (run.board, run.status, run.procedure_text) == (
            "NR-PA8-0009",
            "completed",
            PROCEDURE_TEXT,
        )
        [m] = s.measurements(run_id=old_id)
        assert (m.quantity, m.value, m.channel, m.output) == ("gain", 1.0125, 3, "x5")
        s.add_note(old_id, "re-checked the x5 cable", "k.berg")  # 0002's annotations table
        assert [n.text for n in s.notes(old_id)] == ["re-checked the x5 cable"]
        with pytest.raises(sa.exc.DatabaseError), s.engine.begin() as conn:  # 0002's guards
            conn.execute(sa.text("UPDATE measurements SET value = 2.0"))
        new_id = s.create_run(run_info(), T0)
        for e in step_events(new_id, "scan/0"):
            s.handle(e)
        s.handle(finished(new_id))
        assert s.get_run(new_id).status == "completed"


def test_downgrade_to_the_first_revision_then_upgrade_again(db_url):
    from alembic import command

    from sequencer.store.connect import writer
    from sequencer.store.migrate import _config

    engine = open_engine(db_url)
    try:
        upgrade_to(engine)
        with writer(engine).begin() as conn:
            command.downgrade(_config(conn), "0001")
        with engine.connect() as conn:
            assert current_revisions(conn) == ("0001",)
            assert not sa.inspect(conn).has_table("annotations")
        upgrade_to(engine)
        with engine.connect() as conn:
            assert current_revisions(conn) == (head_revision(),)
    finally:
        engine.dispose()


def test_a_database_from_a_newer_version_is_refused(db_url):
    with Store.open(db_url) as s, s.engine.begin() as conn:
        conn.execute(sa.text("UPDATE alembic_version SET version_num = '0099'"))
    with pytest.raises(StoreError, match=r"revision 0099, newer than this benchwright"):
        Store.open(db_url)


@pytest.mark.parametrize(
    ("url", "message"),
    [
        ("mysql://lab/results", "unsupported database"),
        ("postgresql+psycopg2://127.0.0.1/x", "use postgresql\\+psycopg://"),
        ("not a url", "not a database URL"),
        ("sqlite:////nonexistent-folder-bw/results.db", "does not exist"),
        (
            "postgresql+psycopg://nobody@127.0.0.1:9/none?connect_timeout=2",
            "cannot open the results",
        ),
    ],
)
def test_unusable_databases_give_one_clear_store_error(url, message):
    with pytest.raises(StoreError, match=message):
        Store.open(url)


def test_network_filesystems_are_recognised_from_proc_mounts():
    # /proc/mounts format: device mount-point type options dump pass (proc(5))
    mounts = (
        "/dev/vda / ext4 rw 0 0\n"
        "fs1:/export/lab /mnt/lab nfs4 rw,relatime 0 0\n"
        "//srv/share /mnt/smb\\040share cifs rw 0 0\n"
        "tmpfs /mnt/lab/local tmpfs rw 0 0\n"
    )
    assert network_filesystem(Path("/mnt/lab/results.db"), mounts) == "nfs4"
    assert network_filesystem(Path("/mnt/smb share/r.db"), mounts) == "cifs"
    assert network_filesystem(Path("/mnt/lab/local/r.db"), mounts) is None  # longest mount wins
    assert network_filesystem(Path("/home/r.db"), mounts) is None
    assert network_filesystem(Path("/mnt/labx/r.db"), mounts) is None  # not a path prefix


def test_sqlite_write_transactions_take_the_lock_at_begin_and_reads_do_not(sqlite_url, tmp_path):
    # SQLite "BEGIN IMMEDIATE" (sqlite.org/lang_transaction.html): the write lock at BEGIN, so a
    # second writer waits on the busy timeout instead of failing on a lock upgrade
    import sqlite3

    from sequencer.store.connect import writer

    with Store.open(sqlite_url) as s:
        other = sqlite3.connect(tmp_path / "results.db", timeout=0, isolation_level=None)
        try:
            with s.engine.begin() as reading:
                reading.exec_driver_sql("SELECT count(*) FROM runs").scalar()
                other.execute("BEGIN IMMEDIATE")  # a reader does not hold the write lock
                other.execute("ROLLBACK")
            with writer(s.engine).begin() as writing:
                writing.exec_driver_sql("SELECT 1").scalar()
                with pytest.raises(sqlite3.OperationalError, match="locked"):
                    other.execute("BEGIN IMMEDIATE")
        finally:
            other.close()


def test_upgrade_keeps_instruments_and_adds_their_calibration_date_empty(db_url):
    # revision 0007 (issue 16): instruments.calibrated; rows written before keep every field
    engine = open_engine(db_url)
    try:
        upgrade_to(engine, "0001")
        old_id = _insert_revision_1_run(engine)
        with engine.begin() as conn:
            conn.execute(sa.text(
                "INSERT INTO instruments (run_id, role, address, maker, model, serial, firmware,"
                " calibration_due) VALUES (:r, 'scope', 'TCPIP0::10.0.0.5::INSTR', 'NORDRING',"
                " 'DSO-4', 'NRS-0042', '2.1', '2026-06-30')"), {"r": old_id})
        upgrade_to(engine, "0006")  # the schema of the release before this revision
    finally:
        engine.dispose()
    with Store.open(db_url) as s:
        [scope] = s.get_run(old_id).instruments
        assert (scope.serial, scope.calibration_due, scope.calibrated) == ("NRS-0042", "2026-06-30", "")
        new_id = s.create_run(replace(run_info(), instruments=(
            replace(scope, calibrated="2025-06-30"),)), T0)
        [again] = s.get_run(new_id).instruments
        assert again.calibrated == "2025-06-30"


@pytest.mark.parametrize(("wait_for_disk", "expected"), [(True, 2), (False, 1)])
def test_sqlite_commits_wait_for_the_disk_unless_told_not_to(tmp_path, wait_for_disk, expected):
    # PRAGMA synchronous reads 2 for FULL and 1 for NORMAL (https://www.sqlite.org/pragma.html
    # #pragma_synchronous); the demo's throwaway database is the one opened without waiting
    url = f"sqlite:///{tmp_path / 'r.db'}"
    with Store.open(url, wait_for_disk=wait_for_disk) as store, store.engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == expected
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
