"""A lab's own board types and limit sets in a folder of its own, named once (issue 15): in the
bench file (``lab: DIR``, relative to the bench file) or in ``BENCHWRIGHT_LAB``; the environment
wins over the bench file, with a warning.  Whole runs through the command line on a simulated bench
reached over real TCP sockets, a real SQLite store.

The lab's type PA4L is an invented 4-channel cut of PA8 with a tighter noise limit (0.45 mV; the
bench's second folder says 0.55 mV).  Truth: channel 2 of the simulated board has 0.5 mV of input
noise, so the verdict says which limit set judged it: fail under 0.45, pass under 0.55.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest
import yaml
from click.testing import CliRunner

from drivers.benchfile import load_bench
from drivers.errors import ConfigError
from drivers.sim import start_sim_bench
from sequencer.cli import attach_commands, cli
from sequencer.compose import lab_for
from sequencer.procedure.board_choice import LAB_ENV, LabFiles
from tests.integration.qualification_sim import PROCEDURES, channel, write_board

SERIAL = "NR-PA4L-0001"
BOARD_TYPE = """\
board_type: PA4L
description: a lab's own 4-channel cut of PA8 (invented)
channels: 4
outputs:
  x1: {nominal_gain: 1.0}
  x5: {nominal_gain: 5.0}
  shaped: {}
"""


def _lab(folder: Path, noise_high: float) -> Path:
    """A lab folder with board type PA4L and its limit set (PA8's, noise limit ``noise_high``)."""
    (folder / "boards").mkdir(parents=True)
    (folder / "limits").mkdir()
    (folder / "boards" / "PA4L.yaml").write_text(BOARD_TYPE)
    limits = (PROCEDURES / "limits" / "PA8.yaml").read_text()
    limits = limits.replace("board_type: PA8", "board_type: PA4L")
    limits = limits.replace("{quantity: noise_in_mV, high: 0.6,", f"{{quantity: noise_in_mV, high: {noise_high},")
    assert f"high: {noise_high}," in limits
    (folder / "limits" / "PA4L.yaml").write_text(limits)
    return folder


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    """A simulated 4-channel board, the lab's folder beside the bench file's folder, a second one."""
    root = tmp_path_factory.mktemp("lab")
    board = write_board(root / "sim", SERIAL, [channel(), channel(noise_in_mV=0.5), channel(), channel()])
    _lab(root / "lab", 0.45)
    _lab(root / "other-lab", 0.55)
    with start_sim_bench(board) as sim:
        bench = sim.bench_mapping()
        bench["lab"] = "../lab"  # relative to the bench file's folder
        (root / "benches").mkdir()
        path = root / "benches" / "bench.yaml"
        path.write_text(yaml.safe_dump(bench, sort_keys=False))
        yield root, path


def _run(root: Path, bench: Path, db: str, env: dict[str, str]):
    attach_commands()
    args = ["run", str(PROCEDURES / "noise.yaml"), "--bench", str(bench), "--board", SERIAL,
            "--board-type", "PA4L", "--yes", "--db", f"sqlite:///{root / db}"]  # fmt: skip
    return CliRunner().invoke(cli, args, env=env)


def _noise_limits(db: Path) -> dict[int, tuple[float, str]]:
    with sqlite3.connect(db) as conn:
        rows = conn.execute(
            "SELECT channel, high, verdict FROM measurements WHERE quantity = 'noise_in_mV' "
            "AND output = 'x1'"
        ).fetchall()
        (board_type,) = conn.execute("SELECT board_type FROM runs").fetchone()
    assert board_type == "PA4L"
    return {ch: (high, verdict) for ch, high, verdict in rows}


def test_the_bench_file_names_the_lab_folder(site):
    root, bench = site
    result = _run(root, bench, "bench.db", env={LAB_ENV: ""})
    assert result.exit_code == 1, result.output  # channel 2 fails the lab's noise limit
    assert LAB_ENV not in result.output
    limits = _noise_limits(root / "bench.db")
    assert limits == {1: (0.45, "pass"), 2: (0.45, "fail"), 3: (0.45, "pass"), 4: (0.45, "pass")}


def test_the_environment_wins_over_the_bench_file_and_says_so(site):
    root, bench = site
    result = _run(root, bench, "env.db", env={LAB_ENV: str(root / "other-lab")})
    assert result.exit_code == 0, result.output  # 0.5 mV passes the other folder's 0.55 mV
    assert f"{LAB_ENV}={root / 'other-lab'} is used" in result.output
    assert "the environment wins" in result.output
    assert _noise_limits(root / "env.db")[2] == (0.55, "pass")


def test_precedence_environment_then_bench_then_shipped(site, tmp_path):
    root, bench = site
    assert lab_for({}, str(bench)).folder == root / "benches" / ".." / "lab"
    assert lab_for({}, str(bench)).origin == f"bench file {bench}"
    chosen = lab_for({LAB_ENV: str(root / "other-lab")}, str(bench))
    assert (chosen.folder, chosen.origin, chosen.shadowed) == (
        root / "other-lab", LAB_ENV, root / "benches" / ".." / "lab"
    )
    same = lab_for({LAB_ENV: str(root / "lab")}, str(bench))
    assert same.shadowed is None and same.warning() == ""  # one folder named twice: no warning
    assert lab_for({}, None) == LabFiles()  # no bench file, no environment: shipped files only
    assert LabFiles().find("boards", "PA8") == PROCEDURES / "boards" / "PA8.yaml"
    assert lab_for({}, str(bench)).find("boards", "PA4L") == root / "benches" / ".." / "lab" / "boards" / "PA4L.yaml"


def test_plan_finds_the_lab_type_through_the_bench_file(site):
    _, bench = site
    attach_commands()
    args = ["plan", str(PROCEDURES / "noise.yaml"), "--board-type", "PA4L", "--board", SERIAL]
    planned = CliRunner().invoke(cli, [*args, "--bench", str(bench)], env={LAB_ENV: ""})
    assert planned.exit_code == 0, planned.output
    assert "ch4/" in planned.output and "ch5/" not in planned.output  # PA4L: 4 channels
    unknown = CliRunner().invoke(cli, args, env={LAB_ENV: ""})  # no bench file: shipped types only
    assert unknown.exit_code == 2 and "PA4L" in unknown.output


def test_a_labs_own_procedure_names_its_own_type_and_limit_set(site):
    # a procedure the lab wrote for its type: board_type and limits both PA4L, found only in the
    # folder the bench file names (validate, plan and run alike; shipped files do not know them)
    root, bench = site
    text = (PROCEDURES / "noise.yaml").read_text()
    text = text.replace("board_type: PA8", "board_type: PA4L").replace("limits: PA8", "limits: PA4L")
    text = text.replace("include: parts/", f"include: {PROCEDURES / 'parts'}/")
    assert "board_type: PA4L" in text and "limits: PA4L" in text
    own = root / "benches" / "noise-pa4l.yaml"
    own.write_text(text)
    attach_commands()
    runner = CliRunner()
    valid = runner.invoke(cli, ["validate", str(own), "--bench", str(bench)], env={LAB_ENV: ""})
    assert valid.exit_code == 0, valid.output
    bare = runner.invoke(cli, ["validate", str(own)], env={LAB_ENV: ""})
    assert bare.exit_code == 2 and "'lab: DIR' in the bench file" in bare.output
    args = ["run", str(own), "--bench", str(bench), "--board", SERIAL, "--yes",
            "--db", f"sqlite:///{root / 'own.db'}"]  # fmt: skip
    result = runner.invoke(cli, args, env={LAB_ENV: ""})
    assert result.exit_code == 1, result.output  # channel 2's 0.5 mV fails the lab's 0.45 mV
    assert _noise_limits(root / "own.db")[2] == (0.45, "fail")


def test_a_lab_folder_that_is_not_there_is_located(tmp_path):
    bench = tmp_path / "bench.yaml"
    bench.write_text("bench: b\nlab: nowhere\ninstruments:\n  pulser: {address: 'TCPIP0::127.0.0.1::5025::SOCKET'}\n")
    with pytest.raises(ConfigError) as exc:
        load_bench(bench)
    assert f"{bench}:2:6: lab folder 'nowhere' not found ({tmp_path / 'nowhere'})" in str(exc.value)
    bench.write_text("bench: b\nlab: [1]\ninstruments:\n  pulser: {address: 'TCPIP0::127.0.0.1::5025::SOCKET'}\n")
    with pytest.raises(ConfigError, match=r"bench.yaml:2:6: lab: must be the path of a folder"):
        load_bench(bench)
