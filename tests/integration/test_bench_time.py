"""The bench timing model end to end: a run on the simulator reports the time a real bench would
have taken (its clock, drivers/sim/clock.py), and ``benchwright plan`` estimates the same from the
same model (drivers/timing.py) without touching an instrument.

quick-gain on the example board: 8 channels x 2 outputs x 5 amplitudes, 256 averages at a 1 kHz
trigger = 80 x 0.256 s = 20.48 s of acquisitions (averaging N triggered records takes N trigger
periods: standard), plus about a millisecond per message.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.compose import plan_for
from sequencer.procedure import load_procedure

ROOT = Path(__file__).resolve().parents[2]
QUICK = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
ENGINE_ONLY = ("wait", "prompt")  # waited for by the engine, not by an instrument

attach_commands()


def test_the_run_reports_bench_time_and_the_plan_estimates_the_same(tmp_path):
    result = CliRunner().invoke(
        cli,
        ["run", str(QUICK), "--sim", str(BOARD), "--db", f"sqlite:///{tmp_path}/r.db", "--yes"],
        catch_exceptions=False,
    )
    assert result.exit_code in (0, 1), result.stderr
    found = re.search(
        r"bench time \(timing model, drivers/timing.py\): ([0-9.]+) s = (.*)", result.stdout
    )
    assert found, result.stdout
    bench_s = float(found.group(1))
    assert "acquisition 20.5 s" in found.group(2)  # 80 x 256 / 1 kHz = 20.48 s
    plan = plan_for(load_procedure(QUICK), "NR-PA8-0001")
    instrument_s = sum(
        s.estimate_s for s in plan.steps
        if s.kind not in ENGINE_ONLY and not s.kind.startswith("analyse.")
    )  # fmt: skip
    # the same model: the plan misses only the messages of opening the bench and of the engine's
    # own checks, a fraction of a second against 20 s
    assert instrument_s == pytest.approx(bench_s, rel=0.03)


def test_plan_takes_a_board_files_timing(tmp_path):
    slow = tmp_path / "slow-relays.yaml"
    slow.write_text(BOARD.read_text() + "timing:\n  switch: {relay_settle_ms: 500}\n")
    runner = CliRunner()
    plain = runner.invoke(cli, ["plan", str(QUICK)], catch_exceptions=False)
    slowed = runner.invoke(cli, ["plan", str(QUICK), "--sim", str(slow)], catch_exceptions=False)
    assert plain.exit_code == 0 and slowed.exit_code == 0, slowed.stderr

    def seconds(text: str) -> float:
        return _duration(
            re.search(r"estimated duration (.+)$", text.strip().splitlines()[-1]).group(1)
        )

    # 8 injections + 16 routes, each 0.5 s instead of 2 ms of relay settling: +11.95 s
    assert seconds(slowed.stdout) - seconds(plain.stdout) == pytest.approx(24 * 0.498, abs=1.0)


def _duration(text: str) -> float:
    total = 0.0
    for number, unit in re.findall(r"([0-9.]+)\s*(h|min|s|ms)", text):
        total += float(number) * {"h": 3600, "min": 60, "s": 1, "ms": 1e-3}[unit]
    return total


def test_realtime_needs_a_simulated_bench(tmp_path):
    result = CliRunner().invoke(
        cli, ["run", str(QUICK), "--bench", str(tmp_path / "b.yaml"), "--realtime"]
    )
    assert result.exit_code == 2 and "--realtime paces a simulated bench" in result.output


def test_plan_takes_each_instruments_timing_from_the_bench_file(tmp_path):
    bench = tmp_path / "bench.yaml"
    bench.write_text(
        "bench: b\ninstruments:\n"
        '  pulser: {address: "TCPIP0::127.0.0.1::5025::SOCKET"}\n'
        '  scope: {address: "TCPIP0::127.0.0.1::5026::SOCKET"}\n'
        '  switch: {address: "TCPIP0::127.0.0.1::5027::SOCKET", timing: {relay_settle_ms: 500}}\n'
    )
    runner = CliRunner()
    plain = runner.invoke(cli, ["plan", str(QUICK)], catch_exceptions=False)
    slowed = runner.invoke(cli, ["plan", str(QUICK), "--bench", str(bench)], catch_exceptions=False)
    assert slowed.exit_code == 0, slowed.output

    def seconds(text: str) -> float:
        return _duration(
            re.search(r"estimated duration (.+)$", text.strip().splitlines()[-1]).group(1)
        )

    # the same 24 relay moves as with the board file's timing
    assert seconds(slowed.stdout) - seconds(plain.stdout) == pytest.approx(24 * 0.498, abs=1.0)
    bench.write_text(bench.read_text().replace("relay_settle_ms: 500", "relay_settle: 500"))
    bad = runner.invoke(cli, ["plan", str(QUICK), "--bench", str(bench)])
    assert bad.exit_code == 2
    assert f"{bench}:5:" in bad.output and "unknown timing key 'relay_settle'" in bad.output


def test_plan_refuses_a_simulated_board_and_a_bench_file_together(tmp_path):
    # the two give contradicting instrument timings (a simulated board's, a real bench's): the
    # estimate would silently follow one of them
    bench = tmp_path / "bench.yaml"
    bench.write_text("bench: b\ninstruments:\n"
                     '  scope: {address: "TCPIP0::127.0.0.1::5026::SOCKET"}\n')
    done = CliRunner().invoke(cli, ["plan", str(QUICK), "--sim", str(BOARD), "--bench", str(bench)])
    assert done.exit_code == 2
    assert "--sim" in done.output and "--bench" in done.output and "not both" in done.output
