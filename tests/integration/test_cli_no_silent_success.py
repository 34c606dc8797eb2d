"""Commands that have nothing to do say so and exit 2 (DESIGN.md exit codes: 2 bad input) instead of
printing an empty result with exit 0 (issue 22, "no silent success")."""

from __future__ import annotations

from pathlib import Path

from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.store import Store
from tests.sequencer.reports.simulated_runs import RunSpec, record_run

attach_commands()


def _invoke(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr


def _db(tmp_path: Path, *specs: RunSpec) -> str:
    url = f"sqlite:///{tmp_path / 'results.db'}"
    with Store.open(url) as store:
        for spec in specs:
            record_run(store, spec)
    return url


def test_an_unknown_batch_is_refused_with_the_known_ones(tmp_path: Path) -> None:
    url = _db(tmp_path, RunSpec(batch="NR-B07", full=False), RunSpec(batch="NR-B08", board="NR-PA8-0002", full=False))
    code, out, err = _invoke("report", "--db", url, "--batch", "NOPE")
    assert code == 2 and out == ""
    assert "no batch 'NOPE'" in err and "NR-B07" in err and "NR-B08" in err
    code, _, err = _invoke("report", "--db", url, "--batch", "nr-b07")
    assert code == 2 and "did you mean NR-B07?" in err
    code, out, _ = _invoke("report", "--db", url, "--batch", "NR-B07")
    assert code == 0 and out


def test_certify_refuses_a_run_that_did_not_complete(tmp_path: Path) -> None:
    url = _db(tmp_path, RunSpec(channels=2, status="aborted", full=False))
    code, _, err = _invoke("certify", "--db", url, "--run", "1", "--out", str(tmp_path / "certs"))
    assert code == 2 and "run 1 is aborted" in err and "nothing to certify" in err
    assert not (tmp_path / "certs").exists()
    code, _, err = _invoke("certify", "--db", url, "--run", "1", "--out", str(tmp_path / "certs"), "--partial")
    assert code == 0, err
    assert len(list((tmp_path / "certs").glob("*.pdf"))) == 2


def test_runs_export_and_trend_refuse_a_name_no_run_carries(tmp_path: Path) -> None:
    url = _db(tmp_path, RunSpec(batch="NR-B07", full=False), RunSpec(batch="NR-B08", board="NR-PA8-0002", full=False))
    for args in (("runs", "--batch", "NOPE"), ("export", "--batch", "NOPE"),
                 ("export", "--batch", "NOPE", "--what", "runs", "--format", "json")):
        code, out, err = _invoke(*args, "--db", url)
        assert code == 2 and out == "", (args, out)
        assert "--batch: no batch 'NOPE' in the database" in err and "known batches: NR-B07, NR-B08" in err
    code, out, err = _invoke("runs", "--db", url, "--board", "nr-pa8-0002")
    assert code == 2 and "did you mean 'NR-PA8-0002'?" in err
    code, out, err = _invoke("trend", "--db", url, "--board", "NR-PA8-0003", "--quantity", "gain")
    assert code == 2 and "--board: no board 'NR-PA8-0003'" in err and "NR-PA8-0002" in err
    # a known name that the other filters exclude is an empty answer, not a mistake
    code, out, err = _invoke("runs", "--db", url, "--batch", "NR-B07", "--status", "aborted")
    assert code == 0 and "NR-B07" not in out and err == ""
    code, out, _ = _invoke("export", "--db", url, "--batch", "NR-B08", "--format", "json")
    assert code == 0 and "NR-PA8-0002" in out
