"""Commands that only read the results database never create one (issue 16): a missing database is
bad input (DESIGN.md exit code 2) with the line ``no database at URL``, and nothing appears on disk."""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli

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
