"""``runs`` with verdict, operator and batch, its filters, and the ``batches`` listing, over the
module's real SQLite database (conftest.py)."""

from __future__ import annotations

import json

from click.testing import CliRunner

from sequencer.cli import attach_commands, cli


def _json(*args: str):
    attach_commands()
    result = CliRunner().invoke(cli, [*args, "--format", "json"])
    assert result.exit_code == 0, result.output
    return json.loads(result.output)


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
