"""Commands that only read the results database never create one (issue 16): a missing database is
bad input (DESIGN.md exit code 2) with the line ``no database at URL``, and nothing appears on disk."""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from tests.sequencer.store.conftest import pg_admin, pg_url  # noqa: F401  (PostgreSQL fixtures)

attach_commands()


def _read_only_commands(url: str, tmp_path: Path) -> dict[str, list[str]]:
    cert = tmp_path / "cert.html"
    cert.write_text("<html></html>")
    return {
        "runs": ["runs", "--db", url],
        "export": ["export", "--db", url],
        "trend": ["trend", "--db", url, "--board", "NR-PA8-0001", "--quantity", "gain"],
        "verify": ["verify", "--db", url, str(cert)],
        "certify": ["certify", "--db", url, "--run", "1", "--out", str(tmp_path / "certs")],
        "report": ["report", "--db", url, "--batch", "NR-B01"],
        "resume": ["resume", "1", "--db", url],
        "plan --timing-from": [
            "plan", str(Path(__file__).resolve().parents[2] / "procedures" / "examples" / "quick-gain.yaml"),
            "--timing-from", "1", "--db", url,
        ],
    }


@pytest.mark.parametrize(
    "name",
    ["runs", "export", "trend", "verify", "certify", "report", "resume", "plan --timing-from"],
)
def test_a_missing_sqlite_file_is_refused_and_not_created(tmp_path: Path, name: str) -> None:
    db = tmp_path / "nowhere.db"
    url = f"sqlite:///{db}"
    args = _read_only_commands(url, tmp_path)[name]
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == 2, result.output
    assert f"no database at {url}" in result.stderr
    assert "Traceback" not in result.output
    assert not db.exists()
    assert not list(tmp_path.glob("nowhere.db*"))  # no -wal / -shm either


def test_an_empty_file_is_no_database_and_stays_empty(tmp_path: Path) -> None:
    db = tmp_path / "empty.db"
    db.touch()
    result = CliRunner().invoke(cli, ["runs", "--db", f"sqlite:///{db}"], catch_exceptions=False)
    assert result.exit_code == 2
    assert "no database at" in result.stderr
    engine = sa.create_engine(f"sqlite:///{db}")
    try:
        assert sa.inspect(engine).get_table_names() == []
    finally:
        engine.dispose()


def test_an_existing_database_is_read(tmp_path: Path) -> None:
    from sequencer.store import Store

    url = f"sqlite:///{tmp_path / 'r.db'}"
    Store.open(url).close()  # created by a writing command
    result = CliRunner().invoke(cli, ["runs", "--db", url, "--format", "csv"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert result.stdout.startswith("run_id") or result.stdout.startswith("id")


def _old_database(tmp_path: Path) -> tuple[str, Path, int]:
    """A database written by an earlier schema (revision 0001) holding one completed run, as the
    migration tests build it (raw SQL of that revision)."""
    from sequencer.store.connect import open_engine
    from sequencer.store.migrate import upgrade_to
    from tests.sequencer.store.test_store_schema import _insert_revision_1_run

    db = tmp_path / "old.db"
    url = f"sqlite:///{db}"
    engine = open_engine(url)
    try:
        upgrade_to(engine, "0001")
        run_id = _insert_revision_1_run(engine)
    finally:
        engine.dispose()
    return url, db, run_id


def _revision(url: str) -> tuple[str, ...]:
    from sequencer.store.connect import open_engine
    from sequencer.store.migrate import current_revisions

    engine = open_engine(url)
    try:
        with engine.connect() as conn:
            return current_revisions(conn)
    finally:
        engine.dispose()


@pytest.mark.parametrize("name", ["runs", "export", "trend", "verify", "certify", "report"])
def test_an_older_schema_is_refused_by_read_only_commands_not_upgraded(tmp_path: Path, name: str) -> None:
    # issue 16: read-only commands must not write; opening an old database used to migrate it
    url, _, _ = _old_database(tmp_path)
    args = _read_only_commands(url, tmp_path)[name]
    result = CliRunner().invoke(cli, args, catch_exceptions=False)
    assert result.exit_code == 2, result.output
    assert "schema revision 0001, older than" in result.stderr
    assert "benchwright upgrade --db URL" in result.stderr
    assert _revision(url) == ("0001",)  # untouched


def test_upgrade_carries_an_old_database_forward_keeping_its_run(tmp_path: Path) -> None:
    from sequencer.store.migrate import head_revision

    url, _, run_id = _old_database(tmp_path)
    result = CliRunner().invoke(cli, ["upgrade", "--db", url], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert result.stdout.strip() == f"schema upgraded from revision 0001 to {head_revision()}"
    assert _revision(url) == (head_revision(),)
    listed = CliRunner().invoke(cli, ["runs", "--db", url, "--format", "csv"], catch_exceptions=False)
    assert listed.exit_code == 0, listed.output
    rows = listed.stdout.strip().splitlines()
    assert len(rows) == 2 and rows[1].startswith(f"{run_id},") and "NR-PA8-0009" in rows[1]
    again = CliRunner().invoke(cli, ["upgrade", "--db", url], catch_exceptions=False)
    assert again.exit_code == 0
    assert "already at revision" in again.stdout


def test_upgrade_creates_no_database(tmp_path: Path) -> None:
    db = tmp_path / "nowhere.db"
    result = CliRunner().invoke(cli, ["upgrade", "--db", f"sqlite:///{db}"], catch_exceptions=False)
    assert result.exit_code == 2
    assert "no database at" in result.stderr
    assert not list(tmp_path.glob("nowhere.db*"))


def test_a_writing_command_on_an_existing_database_may_upgrade_it(tmp_path: Path) -> None:
    # run --repeat and resume open an existing database and then write: they carry it forward
    from sequencer.store import Store
    from sequencer.store.migrate import head_revision

    url, _, run_id = _old_database(tmp_path)
    with Store.open(url, create=False, upgrade=True) as store:
        assert store.get_run(run_id).board == "NR-PA8-0009"
    assert _revision(url) == (head_revision(),)


@pytest.mark.postgres
def test_on_postgresql_an_older_schema_is_refused_by_runs_and_carried_forward_by_upgrade(
    request: pytest.FixtureRequest,
) -> None:
    # the same migration path as the SQLite tests above, on a real PostgreSQL schema (skipped,
    # with the reason, when BENCHWRIGHT_TEST_PG_URL is not set)
    url = request.getfixturevalue("pg_url")
    from sequencer.store.connect import open_engine
    from sequencer.store.migrate import head_revision, upgrade_to
    from tests.sequencer.store.test_store_schema import _insert_revision_1_run

    engine = open_engine(url)
    try:
        upgrade_to(engine, "0001")
        run_id = _insert_revision_1_run(engine)
    finally:
        engine.dispose()
    refused = CliRunner().invoke(cli, ["runs", "--db", url], catch_exceptions=False)
    assert refused.exit_code == 2, refused.output
    assert "schema revision 0001, older than" in refused.stderr
    assert _revision(url) == ("0001",)  # untouched
    upgraded = CliRunner().invoke(cli, ["upgrade", "--db", url], catch_exceptions=False)
    assert upgraded.exit_code == 0, upgraded.output
    assert _revision(url) == (head_revision(),)
    listed = CliRunner().invoke(cli, ["runs", "--db", url, "--format", "csv"], catch_exceptions=False)
    rows = listed.stdout.strip().splitlines()
    assert len(rows) == 2 and rows[1].startswith(f"{run_id},") and "NR-PA8-0009" in rows[1]
