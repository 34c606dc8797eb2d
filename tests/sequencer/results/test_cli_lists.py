"""``runs`` with verdict, operator and batch, its filters, and the ``batches`` listing, over the
module's real SQLite database (conftest.py)."""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import sqlalchemy as sa
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.store import Store
from tests.sequencer.store.scenario import run_info


def _json(*args: str):
    attach_commands()
    result = CliRunner().invoke(cli, [*args, "--format", "json"])
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)  # notes go to stderr


def test_runs_show_verdict_operator_and_batch(recorded) -> None:
    url, store = recorded
    rows = _json("runs", "--db", url)
    assert [r["id"] for r in rows] == [r.id for r in store.list_runs()]  # oldest first
    for row in rows:
        failed = any(m.verdict == "fail" for m in store.measurements(run_id=row["id"]))
        assert row["verdict"] == ("fail" if failed else "pass")  # all three runs completed
        assert row["operator"] == "i.lindqvist" and row["batch"] in ("NR-B07", "NR-B08")
    assert [r["board"] for r in _json("runs", "--db", url, "--verdict", "fail")] == ["NR-PA8-0002"]
    assert [r["board"] for r in _json("runs", "--db", url, "--batch", "NR-B08")] == ["NR-PA8-0003"]
    assert _json("runs", "--db", url, "--operator", "nobody") == []


def test_batches_listing(recorded) -> None:
    url, _ = recorded
    rows = {r["batch"]: r for r in _json("batches", "--db", url)}
    assert set(rows) == {"NR-B07", "NR-B08"}
    b07 = rows["NR-B07"]
    assert (b07["boards"], b07["runs"], b07["passed"], b07["failed"], b07["running"]) == (2, 2, 1, 1, 0)
    assert rows["NR-B08"]["first"] == rows["NR-B08"]["last"]


def test_trend_without_a_channel_shows_every_channel(recorded, tmp_path) -> None:
    url, store = recorded
    attach_commands()
    png = tmp_path / "gain.png"
    result = CliRunner().invoke(cli, ["trend", "--db", url, "--board", "NR-PA8-0002", "--quantity", "gain",
                                      "--procedure", "pa8-qualify", "--out", str(png)])  # fmt: skip
    assert result.exit_code == 0, result.output
    keys = {(m.channel, m.output) for m in store.measurements(board="NR-PA8-0002") if m.quantity == "gain"}
    assert len(keys) > 1
    for ch, out in keys:
        assert f"channel {ch} output {out} over 1 run(s): 2" in result.output  # run ids listed
    assert png.read_bytes()[:4] == b"\x89PNG"
    csv_text = CliRunner().invoke(cli, ["trend", "--db", url, "--board", "NR-PA8-0002", "--quantity", "gain",
                                        "--format", "csv"]).output  # fmt: skip
    assert csv_text.splitlines()[0].startswith("channel,output,run_id,")
    assert len([line for line in csv_text.splitlines()[1:] if line[:1].isdigit()]) == len(keys)


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_runs_writes_nothing_and_shows_a_dead_run_as_interrupted(tmp_path: Path) -> None:
    """Issue 16: a read-only command does not write.  A run stored as running whose recorder went
    silent 10 minutes ago (another PC) is shown interrupted (stale) -- judged from the heartbeat age
    at read time -- while the database file stays byte-identical (SHA-256 before and after)."""
    db = tmp_path / "results.db"
    url = f"sqlite:///{db}"
    with Store.open(url) as store:
        gone = store.create_run(run_info("NR-PA8-0010"), datetime.now(UTC) - timedelta(minutes=10))
        with store.engine.begin() as conn:
            conn.execute(sa.text("UPDATE runs SET process_tag = 'another-boot:1', heartbeat_at = :b "
                                 "WHERE id = :i"), {"b": datetime.now(UTC) - timedelta(minutes=10), "i": gone})
    before = _digest(db)
    attach_commands()
    result = CliRunner().invoke(cli, ["runs", "--db", url, "--format", "json"])
    assert result.exit_code == 0, result.output
    rows = json.loads(result.stdout)
    assert [(r["id"], r["status"]) for r in rows] == [(gone, "interrupted (stale)")]
    assert rows[0]["end"] is not None
    assert f"run {gone} is stored as running" in result.stderr and "no heartbeat" in result.stderr
    assert [r["id"] for r in _json("runs", "--db", url, "--status", "interrupted")] == [gone]
    assert _json("runs", "--db", url, "--status", "running") == []
    assert _digest(db) == before
    with Store.open(url, create=False) as store:
        assert store.get_run(gone).status == "running"  # left to the writers


def test_batches_judge_a_gone_recorder_at_read_time_as_runs_does(tmp_path: Path) -> None:
    """A run stored as running whose recorder went silent 10 minutes ago is not "running" in
    ``batches`` either (as ``runs`` shows it: interrupted (stale)), while a run whose recorder is
    this very process, beating now, still is; the file is not written (SHA-256 before and after).
    Both paths: the light reader (plain URL) and the Store (a URL with a driver option)."""
    db = tmp_path / "results.db"
    url = f"sqlite:///{db}"
    with Store.open(url) as store:
        gone = store.create_run(run_info("NR-PA8-0010", batch="B-GONE"),
                                datetime.now(UTC) - timedelta(minutes=10))
        store.create_run(run_info("NR-PA8-0011", batch="B-LIVE"), datetime.now(UTC))
        with store.engine.begin() as conn:
            conn.execute(sa.text("UPDATE runs SET process_tag = 'another-boot:1', heartbeat_at = :b "
                                 "WHERE id = :i"), {"b": datetime.now(UTC) - timedelta(minutes=10), "i": gone})
    before = _digest(db)
    for db_url in (url, url + "?timeout=20"):
        rows = {r["batch"]: r for r in _json("batches", "--db", db_url)}
        assert (rows["B-GONE"]["runs"], rows["B-GONE"]["running"]) == (1, 0)
        assert (rows["B-LIVE"]["runs"], rows["B-LIVE"]["running"]) == (1, 1)
    assert _digest(db) == before
