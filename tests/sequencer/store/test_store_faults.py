"""Storage faults (issue 19 item 7): a full or damaged database is a StorageFault with one line
naming the cause, and the CLI exits 3 (DESIGN.md: aborted), not 2 (bad input) or "internal error".

Full disk without root mounts: SQLite's ``PRAGMA max_page_count`` caps the file, after which a
write fails with SQLITE_FULL exactly as on a full device (https://www.sqlite.org/pragma.html
#pragma_max_page_count; https://www.sqlite.org/rescode.html#full).
"""

from __future__ import annotations

import errno
import sqlite3
from pathlib import Path

import pytest
from click.testing import CliRunner
from sqlalchemy import event

from sequencer.cli import attach_commands, cli
from sequencer.errors import StorageFault, StoreError
from sequencer.store import Store
from sequencer.store.faults import storage_cause

from .scenario import T0, run_info, step_events

attach_commands()


def cap_file(store: Store) -> None:
    """Every new connection may not grow the file past its present size (a full database)."""
    with store.engine.connect() as conn:
        pages = conn.exec_driver_sql("PRAGMA page_count").scalar()
    store.engine.dispose()

    @event.listens_for(store.engine, "connect")
    def _cap(dbapi_conn, _record):
        dbapi_conn.execute(f"PRAGMA max_page_count = {pages}")


def test_a_full_database_is_a_storage_fault_naming_the_cause(sqlite_url: str) -> None:
    store = Store.open(sqlite_url)
    run_id = store.create_run(run_info(), T0)
    cap_file(store)
    with pytest.raises(StorageFault) as caught:
        for event_ in step_events(run_id, "scan/x1", index=1, n_measurements=50, n_traces=20, seed=1):
            store.handle(event_)
    line = str(caught.value)
    assert "\n" not in line and "is full" in line and "database or disk is full" in line, line
    store.close()


def test_a_damaged_file_is_a_storage_fault_not_no_database(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'results.db'}"
    with Store.open(url) as store:
        for k in range(5):
            store.create_run(run_info(f"NR-PA8-000{k}"), T0)
    with (tmp_path / "results.db").open("r+b") as f:  # overwrite every page after the first
        size = f.seek(0, 2)
        f.seek(4096)
        f.write(b"\xff" * (size - 4096))
    with pytest.raises(StorageFault, match="damaged"), Store.open(url, create=False) as store:
        store.list_runs()
    code, _, err = invoke("runs", "--db", url)
    assert code == 3 and err.startswith("aborted: storage fault: ") and "damaged" in err, err
    assert len(err.strip().splitlines()) == 1 and "internal error" not in err


def test_driver_errors_are_told_apart_by_their_result_codes() -> None:
    full = sqlite3.OperationalError("database or disk is full")
    full.sqlite_errorname = "SQLITE_FULL"  # what sqlite3 sets (Python >= 3.11)
    io = sqlite3.OperationalError("disk I/O error")
    io.sqlite_errorname = "SQLITE_IOERR_WRITE"  # an extended code of SQLITE_IOERR
    locked = sqlite3.OperationalError("database is locked")
    locked.sqlite_errorname = "SQLITE_BUSY"
    assert "full" in storage_cause(full) and "I/O" in storage_cause(io)
    assert storage_cause(locked) == ""  # busy is contention, not a storage fault
    assert storage_cause(OSError(errno.ENOSPC, "No space left on device")) == "the disk is full"
    assert not issubclass(StoreError, StorageFault) and issubclass(StorageFault, StoreError)


def invoke(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr
