"""Messages that name the right fix and the right place (issue 22): the missing --bench/--sim, the
offending line of a batch file, no "<options>:1:1" location; a failed board reported as failed."""

from __future__ import annotations

import re
from pathlib import Path

from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.store import Store
from tests.sequencer.reports.simulated_runs import RunSpec, record_run

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"

attach_commands()


def _invoke(*args: str) -> tuple[int, str, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout, result.stderr


def test_run_without_a_bench_asks_for_bench_or_sim(tmp_path: Path) -> None:
    db = tmp_path / "results.db"
    code, _, err = _invoke("run", str(QUICK), "--board", "NR-PA8-0001", "--db", f"sqlite:///{db}")
    assert code == 2 and "--bench FILE" in err and "--sim BOARD.yaml" in err
    assert "--board" not in err and "<options>" not in err
    assert not db.exists()  # refused before the database was opened


def test_an_unopenable_log_is_not_located_at_options(tmp_path: Path) -> None:
    code, _, err = _invoke("run", str(QUICK), "--sim", str(BOARD), "--db", f"sqlite:///{tmp_path / 'r.db'}",
                           "--yes", "--log", str(tmp_path / "no" / "such" / "dir" / "log.txt"))
    assert code == 2 and "--log: cannot open" in err and "<options>" not in err


def _batch_file(tmp_path: Path, boards: str) -> Path:
    path = tmp_path / "batch.yaml"
    path.write_text(f"batch: NR-B07\nprocedure: {QUICK}\nboard_type: PA8\noperator: T. Tester\nboards:\n{boards}")
    return path


def test_batch_checks_every_board_file_before_the_first_board(tmp_path: Path) -> None:
    sims = tmp_path / "sims"
    sims.mkdir()
    (sims / "NR-PA8-0001.yaml").write_text(BOARD.read_text())
    path = _batch_file(tmp_path, "  - serial: NR-PA8-0001\n  - serial: NR-PA8-0002\n  - serial: NR-PA8-0003\n")
    db = tmp_path / "results.db"
    code, out, err = _invoke("batch", str(path), "--sim-dir", str(sims), "--yes", "--db", f"sqlite:///{db}")
    assert code == 2
    lines = [line for line in err.splitlines() if line.strip()]
    located = [re.match(r"^(.+):(\d+):(\d+): no simulated board file .*(NR-PA8-000\d)$", line) for line in lines]
    assert all(located), err
    # both missing boards named, each at its own entry's line of the batch file (lines 7 and 8)
    assert [(m[2], m[4]) for m in located if m] == [("7", "NR-PA8-0002"), ("8", "NR-PA8-0003")]
    assert "mount" not in out and "run 1" not in out  # no board was run


def test_a_failed_board_is_reported_as_failed_not_qualified(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'results.db'}"
    with Store.open(url) as store:  # a completed run in which channel 2's gain is 30 % low: fail
        record_run(store, RunSpec(board="NR-PA8-0001", batch="NR-B07", full=False, gain_scale={2: 0.7}))
    sims = tmp_path / "sims"
    sims.mkdir()
    (sims / "NR-PA8-0001.yaml").write_text(BOARD.read_text())
    path = _batch_file(tmp_path, "  - serial: NR-PA8-0001\n")
    code, out, err = _invoke("batch", str(path), "--sim-dir", str(sims), "--yes", "--db", url)
    assert code == 1, out + err  # DESIGN.md: 1 = a value outside its limits
    assert "already qualified" not in out
    assert "failed in run 1 (--requalify tests it again)" in out


def test_the_operator_defaults_to_the_login_name(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'results.db'}"
    result = CliRunner(env={"LOGNAME": "t.newcomer"}).invoke(
        cli, ["run", str(QUICK), "--sim", str(BOARD), "--db", url, "--yes"], catch_exceptions=False)
    assert result.exit_code == 0, result.stdout + result.stderr
    with Store.open(url) as store:
        assert store.get_run(1).operator == "t.newcomer"


def test_a_batch_without_an_operator_records_the_login_name(tmp_path: Path) -> None:
    # getpass.getuser reads LOGNAME first (Python docs, getpass.getuser)
    sims = tmp_path / "sims"
    sims.mkdir()
    (sims / "NR-PA8-0001.yaml").write_text(BOARD.read_text())
    path = tmp_path / "batch.yaml"
    path.write_text(f"batch: NR-B09\nprocedure: {QUICK}\nboard_type: PA8\nboards:\n  - serial: NR-PA8-0001\n")
    url = f"sqlite:///{tmp_path / 'results.db'}"
    result = CliRunner(env={"LOGNAME": "t.newcomer"}).invoke(
        cli, ["batch", str(path), "--sim-dir", str(sims), "--yes", "--db", url], catch_exceptions=False)
    assert result.exit_code == 0, result.stdout + result.stderr
    with Store.open(url) as store:
        (run,) = store.list_runs(batch="NR-B09")
        assert run.operator == "t.newcomer"


def test_plan_summary_names_the_blocks_after_the_procedure_sections() -> None:
    code, out, _ = _invoke("plan", str(QUICK))
    assert code == 0
    assert re.search(r"\(setup \d+, steps \d+, cleanup \d+", out), out  # sections setup/steps/cleanup
    assert "main " not in out


def test_batch_plans_every_board_before_the_first_board(tmp_path: Path) -> None:
    # board 3's type is a typo: found before board 1 is run, at board 3's entry (line 8)
    sims = tmp_path / "sims"
    sims.mkdir()
    for serial in ("NR-PA8-0001", "NR-PA8-0002", "NR-PA8-0003"):
        (sims / f"{serial}.yaml").write_text(BOARD.read_text().replace("NR-PA8-0001", serial))
    path = _batch_file(tmp_path, "  - serial: NR-PA8-0001\n  - serial: NR-PA8-0002\n"
                                 "  - {serial: NR-PA8-0003, board_type: PA9}\n")
    db = tmp_path / "results.db"
    code, out, err = _invoke("batch", str(path), "--sim-dir", str(sims), "--yes", "--db", f"sqlite:///{db}")
    assert code == 2, (out, err)
    problems = [line for line in err.splitlines() if line.startswith(f"{path}:")]
    assert problems and all(line.startswith(f"{path}:8:") for line in problems), err
    assert "NR-PA8-0003" in problems[0] and "board type 'PA9' is not known (did you mean 'PA8'?)" in problems[0]
    assert "refused before the first board" in out and "run 1" not in out
    if db.exists():
        with Store.open(f"sqlite:///{db}") as store:
            assert store.list_runs() == []


def test_batch_on_a_bench_without_a_needed_role_is_refused_at_its_instruments_key(tmp_path: Path) -> None:
    # quick-gain.yaml needs pulser, scope and switch; this bench has no switch.  Nothing is opened
    # (the addresses lead nowhere): the bench is checked against every board's plan first.
    bench = tmp_path / "bench.yaml"
    bench.write_text(
        "bench: bench-9\n"
        "instruments:\n"
        '  pulser: {address: "TCPIP0::127.0.0.1::9::SOCKET", dialect: generic}\n'
        '  scope: {address: "TCPIP0::127.0.0.1::9::SOCKET", dialect: generic}\n'
    )
    path = _batch_file(tmp_path, "  - serial: NR-PA8-0001\n  - serial: NR-PA8-0002\n")
    code, out, err = _invoke("batch", str(path), "--bench", str(bench), "--yes",
                             "--db", f"sqlite:///{tmp_path / 'r.db'}")
    assert code == 2, (out, err)
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err  # the same problem for both boards is said once
    assert lines[0].startswith(f"{bench}:2:1: role 'switch' is not on bench 'bench-9'"), err
    assert "add 'switch:' under instruments:" in lines[0]
    assert "NR-PA8-0001, NR-PA8-0002" in out


def test_validate_and_plan_check_a_procedure_against_a_bench_file(tmp_path: Path) -> None:
    # bias-leakage.yaml ramps to 30 V at 10 V/s; this bench allows 20 V at 5 V/s.  Nothing is opened.
    bench = tmp_path / "bench.yaml"
    bench.write_text(
        "bench: bench-3\n"
        "instruments:\n"
        "  bias:\n"
        '    address: "TCPIP0::127.0.0.1::9::SOCKET"\n'
        "    max_volts: 20\n"
        "    max_ramp_V_per_s: 5\n"
    )
    leakage = ROOT / "procedures" / "bias-leakage.yaml"
    for command in ("validate", "plan"):
        code, out, err = _invoke(command, str(leakage), "--bench", str(bench))
        assert code == 2, (command, out, err)
        lines = err.strip().splitlines()
        assert any(line.startswith(f"{bench}:5:16: ") and "30 V exceeds the bench limit 20 V" in line
                   for line in lines), err
        assert any(line.startswith(f"{bench}:6:23: ") and "10 V/s exceeds" in line for line in lines), err
        assert "ok" not in out
    roomy = tmp_path / "roomy.yaml"
    roomy.write_text(bench.read_text().replace("max_volts: 20", "max_volts: 60").replace(
        "max_ramp_V_per_s: 5", "max_ramp_V_per_s: 10"))
    code, out, err = _invoke("validate", str(leakage), "--bench", str(roomy))
    assert code == 0 and "ok (and on bench 'bench-3')" in out, err


def test_an_overdue_instrument_is_located_at_its_calibration_due(tmp_path: Path) -> None:
    import datetime as dt

    import yaml

    from drivers.sim import start_sim_bench

    with start_sim_bench(BOARD) as sim:
        mapping = sim.bench_mapping()
        mapping["instruments"]["scope"]["calibration_due"] = dt.date(2020, 1, 31)
        mapping["instruments"]["scope"]["calibrated"] = dt.date(2019, 1, 31)
        bench = tmp_path / "bench.yaml"
        bench.write_text(yaml.safe_dump(mapping, sort_keys=False))
        code, out, err = _invoke("run", str(QUICK), "--bench", str(bench), "--board", "NR-PA8-0001",
                                 "--db", f"sqlite:///{tmp_path / 'r.db'}", "--yes")
    assert code == 2, (out, err)
    text = bench.read_text().splitlines()
    scope = text.index("  scope:")
    line = next(i for i, t in enumerate(text, start=1) if i > scope and "calibration_due" in t)
    column = text[line - 1].index("2020-01-31") + 1
    assert err.startswith(f"{bench}:{line}:{column}: scope: calibration was due 2020-01-31"), err
