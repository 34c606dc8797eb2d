"""Calibration and identity are checked before the run (issue 16): an instrument past its calibration
date or answering with another identity than the bench file expects refuses the run (exit 2, nothing
recorded) unless the operator overrides it explicitly; the override is kept with the run and printed
on every certificate of it.  Real sockets to the simulator, a real SQLite file."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
import yaml
from click.testing import CliRunner

from drivers.sim import start_sim_bench
from sequencer.cli import attach_commands, cli
from sequencer.store import Store

attach_commands()

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"


def _invoke(*args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout + result.stderr


@pytest.fixture(scope="module")
def sim():
    with start_sim_bench(BOARD) as bench:
        yield bench.bench_mapping()


def _bench(tmp_path: Path, mapping: dict, role: str, **change: object) -> Path:
    data = {"bench": mapping["bench"], "instruments": {r: dict(e) for r, e in mapping["instruments"].items()}}
    data["instruments"][role].update(change)
    path = tmp_path / "bench.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"calibrated": dt.date(2019, 1, 31), "calibration_due": dt.date(2020, 1, 31)},
         "scope: calibration was due 2020-01-31"),
        ({"expect_id": "OTHERMAKER,XYZ"}, "scope: identity"),
    ],
)
def test_a_bench_with_a_problem_is_refused_before_the_run(tmp_path, sim, change, message):
    db = tmp_path / "r.db"
    bench = _bench(tmp_path, sim, "scope", **change)
    code, out = _invoke("run", str(QUICK), "--bench", str(bench), "--board", "NR-PA8-0001",
                        "--db", f"sqlite:///{db}", "--yes")
    assert code == 2, out
    assert message in out and "--override-instrument-checks" in out
    assert "Traceback" not in out
    with Store.open(f"sqlite:///{db}") as store:
        assert store.list_runs() == []  # refused before anything was recorded


def test_the_override_is_recorded_and_printed_on_every_certificate(tmp_path, sim):
    db = f"sqlite:///{tmp_path / 'r.db'}"
    calibrated = dt.date(2019, 1, 31).isoformat()
    bench = _bench(tmp_path, sim, "scope", calibrated=dt.date(2019, 1, 31), calibration_due=dt.date(2020, 1, 31))
    code, out = _invoke("run", str(QUICK), "--bench", str(bench), "--board", "NR-PA8-0001",
                        "--db", db, "--yes", "--operator", "k.berg", "--override-instrument-checks")
    assert code in (0, 1), out
    assert "instrument check overridden by k.berg" in out
    with Store.open(db) as store:
        [caveat] = store.caveats(1)
    assert caveat.startswith("instrument check overridden by k.berg: scope: calibration was due 2020-01-31")
    code, out = _invoke("certify", "--db", db, "--run", "1", "--out", str(tmp_path / "certs"))
    assert code == 0, out
    htmls = sorted((tmp_path / "certs").glob("*.html"))
    assert len(htmls) == 8  # one per channel of the board type
    for html in htmls:
        text = html.read_text(encoding="utf-8")
        assert f"Caveat: {caveat}" in text
        assert "2020-01-31" in text  # the scope's calibration due date in the instruments table
        # and its calibration date beside it (row 4: roles sorted, the scope after the pulser)
        assert f'data-field="instruments.4.calibrated">{calibrated}<' in text
        # test conditions: quick-gain.yaml's parameters as resolved for the run
        assert "Test condition: top = 160 mV" in text
        assert "Test condition: points = 5" in text
        # procedures/limits/PA8.yaml states "decision_rule: simple" (U = 2u, the default k)
        assert "Decision rule: simple acceptance (ILAC-G8:09/2019)" in text and "k = 2" in text
    code, out = _invoke("verify", "--db", db, str(htmls[0]))
    assert code == 0, out


def _batch(tmp_path: Path, serials: list[str]) -> Path:
    path = tmp_path / "batch.yaml"
    path.write_text(f"batch: NR-TEST-CAL\nprocedure: {QUICK}\nboard_type: PA8\noperator: T. Tester\nboards:\n"
                    + "".join(f"  - serial: {s}\n" for s in serials))
    return path


def test_a_batch_on_an_overdue_bench_is_refused_before_the_first_board(tmp_path, sim):
    # issue 16: the refusal used to come with the first board's run (after mounting it) and end the
    # batch without a word on the boards left; now it comes before any board, with that summary
    db = tmp_path / "r.db"
    bench = _bench(tmp_path, sim, "scope", calibrated=dt.date(2019, 1, 31), calibration_due=dt.date(2020, 1, 31))
    batch = _batch(tmp_path, ["NR-PA8-0001", "NR-PA8-0002"])
    code, out = _invoke("batch", str(batch), "--bench", str(bench), "--db", f"sqlite:///{db}", "--yes")
    assert code == 2, out
    assert "batch NR-TEST-CAL: refused before the first board" in out
    assert "scope: calibration was due 2020-01-31" in out
    assert "no board was tested (2 of 2 waiting: NR-PA8-0001, NR-PA8-0002)" in out
    assert "--override-instrument-checks" in out and "Traceback" not in out
    assert "[1/2]" not in out  # no board started
    with Store.open(f"sqlite:///{db}") as store:
        assert store.list_runs() == []


def test_a_batch_with_the_override_runs_and_records_the_caveat(tmp_path, sim):
    db = f"sqlite:///{tmp_path / 'r.db'}"
    bench = _bench(tmp_path, sim, "scope", calibrated=dt.date(2019, 1, 31), calibration_due=dt.date(2020, 1, 31))
    batch = _batch(tmp_path, ["NR-PA8-0001"])
    code, out = _invoke("batch", str(batch), "--bench", str(bench), "--db", db, "--yes",
                        "--override-instrument-checks")
    assert code in (0, 1), out
    assert "refused before the first board" not in out
    with Store.open(db) as store:
        [run] = store.list_runs()
        [caveat] = store.caveats(run.id)
    assert "scope: calibration was due 2020-01-31" in caveat


def test_a_refusal_mid_batch_prints_the_summary_of_what_was_done_then_exits_2(tmp_path, sim, monkeypatch):
    # The scope's calibration is due on DUE: fine when the batch is checked and board 1 runs, past
    # due once the clock has passed midnight before board 2 (drivers/benchfile.py: due < today).
    # The batch used to end with the refusal alone (exit 2, no summary of board 1).
    import sequencer.batchrun
    import sequencer.compose

    due = dt.date.today()  # the simulated bench's other instruments are in calibration today
    runs_checked = []

    class Midnight(dt.date):
        @classmethod
        def today(cls) -> dt.date:  # the check of each run: board 1 on DUE, then the day after
            runs_checked.append(1)
            return due if len(runs_checked) == 1 else due + dt.timedelta(days=1)

    class Due(dt.date):
        @classmethod
        def today(cls) -> dt.date:
            return due

    monkeypatch.setattr(sequencer.batchrun, "date", Due)
    monkeypatch.setattr(sequencer.compose, "date", Midnight)
    db = f"sqlite:///{tmp_path / 'r.db'}"
    bench = _bench(tmp_path, sim, "scope", calibrated=due - dt.timedelta(days=365), calibration_due=due)
    batch = _batch(tmp_path, ["NR-PA8-0001", "NR-PA8-0002", "NR-PA8-0003"])
    code, out = _invoke("batch", str(batch), "--bench", str(bench), "--db", db, "--yes")
    assert code == 2, out
    assert len(runs_checked) == 2, out  # board 1 checked and ran; board 2 refused; board 3 never tried
    assert "[1/3] NR-PA8-0001: PASSED" in out or "[1/3] NR-PA8-0001: FAILED" in out
    assert "[2/3] NR-PA8-0002: NOT RUN" in out and f"calibration was due {due.isoformat()} (1 days ago)" in out
    assert "batch NR-TEST-CAL: 1 boards, 8 channels" in out  # the summary of what was done
    assert "refused mid-way, 2 board(s) not run (NR-PA8-0002, NR-PA8-0003)" in out
    assert "Traceback" not in out
    with Store.open(db) as store:
        assert [r.board for r in store.list_runs()] == ["NR-PA8-0001"]  # board 2 was never recorded
