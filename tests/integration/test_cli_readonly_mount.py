"""A results database on a read-only mount can be read (issue 19 item 7: "a database on a read-only
mount cannot even be read").

SQLite reads a WAL database through its ``-shm`` index, which it cannot create in a folder nobody
may write; a reader then opens the file through a read-only URI (``mode=ro``, plus ``immutable=1``
when the folder cannot hold the index: https://www.sqlite.org/wal.html "Read-Only Databases",
https://www.sqlite.org/uri.html).  The mount is real: the folder is bind-mounted read-only with
mount(8), which needs CAP_SYS_ADMIN (root in a container here) -- elsewhere the test is skipped with
the reason, since root ignores chmod and permissions alone cannot show it.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path

import pytest
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.store import Store
from sequencer.store.sqlite_files import read_only_uri
from tests.sequencer.store.scenario import finished, run_info, step_events

attach_commands()


def _mount(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(["mount", *args], capture_output=True, text=True, timeout=30)


@pytest.fixture
def read_only_copy(tmp_path: Path) -> Iterator[tuple[Path, Path]]:
    """(folder, the same folder bind-mounted read-only); unmounted at the end."""
    src, ro = tmp_path / "src", tmp_path / "ro"
    src.mkdir()
    ro.mkdir()
    bound = _mount("--bind", str(src), str(ro))
    if bound.returncode != 0:
        pytest.skip(f"cannot bind-mount here (mount(8) needs CAP_SYS_ADMIN): {bound.stderr.strip()}")
    try:
        remounted = _mount("-o", "remount,ro,bind", str(ro))
        if remounted.returncode != 0:
            pytest.skip(f"cannot remount read-only here: {remounted.stderr.strip()}")
        yield src, ro
    finally:
        if subprocess.run(["umount", str(ro)], capture_output=True, timeout=30).returncode != 0:
            subprocess.run(["umount", "-l", str(ro)], capture_output=True, timeout=30)


def record_runs(folder: Path) -> None:
    """One completed run and one left running by a recorder that is gone (a dead pid)."""
    url = f"sqlite:///{folder / 'results.db'}"
    with Store.open(url) as store:
        done = store.create_run(run_info(), datetime.now(UTC))
        for event in step_events(done, "steps/1"):
            store.handle(event)
        store.handle(finished(done))
        left = store.create_run(run_info("NR-PA8-0002"), datetime.now(UTC))
        with store.engine.begin() as conn:  # its process is gone (a pid no process has)
            conn.exec_driver_sql(f"UPDATE runs SET pid = {2**22 + 7} WHERE id = {left}")


def test_read_only_commands_read_a_database_on_a_read_only_mount(read_only_copy):
    src, ro = read_only_copy
    record_runs(src)
    before = sorted(p.name for p in src.iterdir())
    with pytest.raises(OSError):  # the premise: nothing can be written there, not even by root
        (ro / "probe").write_text("x")
    assert not os.access(ro, os.W_OK)
    url = f"sqlite:///{ro / 'results.db'}"
    runner = CliRunner()
    listed = runner.invoke(cli, ["runs", "--db", url, "--format", "csv"], catch_exceptions=False)
    assert listed.exit_code == 0, listed.output
    rows = listed.stdout.strip().splitlines()
    # the run whose process is gone is judged at read time ('interrupted (dead)'); the stored status stays
    # 'running' since a read-only command writes nothing (and here could not)
    assert len(rows) == 3 and ",completed," in rows[1] + rows[2]
    assert ",interrupted (dead)," in rows[1] + rows[2]
    exported = runner.invoke(cli, ["export", "--db", url, "--run", "1"], catch_exceptions=False)
    assert exported.exit_code == 0, exported.output
    assert len(exported.stdout.strip().splitlines()) == 1 + 3  # header and the 3 measurements
    with Store.open(url, create=False) as store:  # the SQLAlchemy path (trend, verify, certify)
        assert store.read_only
        assert [r.status for r in store.list_runs()] == ["completed", "running"]
    assert sorted(p.name for p in src.iterdir()) == before  # no -wal, no -shm, nothing written


def test_the_read_only_uri_refuses_writes(tmp_path):
    # Control without a mount: the URI a reader uses on a read-only location never writes, even
    # where the folder could be written (SQLite: "attempt to write a readonly database").
    url = f"sqlite:///{tmp_path / 'results.db'}"
    record_runs(tmp_path)
    with Store.open(url) as store:
        assert not store.read_only  # a writable location opens as always
    conn = sqlite3.connect(read_only_uri(tmp_path / "results.db"), uri=True)
    try:
        assert conn.execute("SELECT count(*) FROM runs").fetchone() == (2,)
        with pytest.raises(sqlite3.OperationalError, match="readonly"):
            conn.execute("UPDATE runs SET board = 'x'")
    finally:
        conn.close()
