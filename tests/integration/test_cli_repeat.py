"""A repeat is provably the same procedure (issue 16): every input of a run is stored, ``--repeat``
runs the stored texts only, and a changed text under a released name and version is refused.

Real sockets to the simulator and a real SQLite file.  The procedure, its fragment, its limit set and
its board type are written to a temporary folder so that the test can change them between runs.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest
from click.testing import CliRunner

from sequencer.cli import attach_commands, cli
from sequencer.inputs import procedure_digest
from sequencer.store import Store
from tests.integration.qualification_sim import channel, write_board

attach_commands()

BOARD_TYPE = """board_type: TT2
description: invented two-channel test board
channels: 2
outputs:
  x1: {nominal_gain: 1.0}
"""
LIMITS = """board_type: TT2
version: "1"
limits:
  - {quantity: gain, low: 0.9, high: 1.1, unit: V/V}
"""
SCAN = """name: scan
version: "1"
parameters:
  points: {points}
steps:
  - scope.timebase: {{sample_rate: 1 GS/s, points: 400, pretrigger: 150 ns}}
  - scope.input: {{input: 1, range: 400 mV}}
  - sweep: {{amp: {{linspace: [20 mV, 100 mV, "{{points}}"]}}}}
    do:
      - pulser.amplitude: "{{amp}}"
      - scope.capture: {{inputs: [1], into: [pulses]}}
  - analyse.transfer: {{traces: pulses, x: amp, n_baseline: 120}}
"""
PROCEDURE = """name: tiny-gain
version: "{version}"
board_type: {board_type}
roles: [pulser, scope, switch]
limits: limits.yaml
setup:
  - scope.trigger: {{source: EXTernal, level: 0 mV}}
  - pulser.shape: {{width: 50 ns, leading: 2 ns, trailing: 2 ns}}
  - pulser.rate: 1 kHz
  - pulser.output: true
steps:
  - for_channels: all
    do:
      - switch.inject: "{{channel}}"
      - for_outputs: [x1]
        do:
          - switch.route: {{channel: "{{channel}}", output: "{{output}}", input: 1}}
          - include: parts/scan.yaml
cleanup:
  - pulser.output: false
  - switch.open_all:
"""


def _write(folder: Path, *, version: str = "1.0", points: int = 3) -> Path:
    (folder / "parts").mkdir(parents=True, exist_ok=True)
    (folder / "TT2.yaml").write_text(BOARD_TYPE)
    (folder / "limits.yaml").write_text(LIMITS)
    (folder / "parts" / "scan.yaml").write_text(SCAN.format(points=points))
    proc = folder / "tiny.yaml"
    proc.write_text(PROCEDURE.format(version=version, board_type=folder / "TT2.yaml"))
    return proc


def _invoke(*args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, list(args), catch_exceptions=False)
    return result.exit_code, result.stdout + result.stderr


@pytest.fixture
def bench(tmp_path: Path) -> tuple[Path, str]:
    board = write_board(tmp_path / "sim", "NR-TT2-0001", [channel(), channel(gain_x1=1.02)], seed=3)
    return board, f"sqlite:///{tmp_path / 'r.db'}"


def _steps(store: Store, run_id: int) -> list[str]:
    return [s.path for s in store.steps(run_id)]


def test_every_input_is_stored_and_the_hash_covers_them(tmp_path: Path, bench) -> None:
    board, db = bench
    proc = _write(tmp_path / "p")
    code, out = _invoke("run", str(proc), "--sim", str(board), "--db", db, "--yes")
    assert code == 0, out
    with Store.open(db) as store:
        run = store.list_runs()[0]
        inputs = store.run_inputs(run.id)
        captures = [s for s in store.completed_steps(run.id).values() if s.kind == "scope.capture"]
    # each step's labels kept as typed values: the sweep in mV (linspace 20..100 mV, 3 points)
    assert sorted({s.labels["amp"] for s in captures}) == [20.0, 60.0, 100.0]
    assert {s.labels["channel"] for s in captures} == {1, 2}
    assert {s.labels["output"] for s in captures} == {"x1"}
    kinds = {(i.kind, i.name) for i in inputs}
    assert {("procedure", "tiny-gain"), ("include", "parts/scan.yaml"), ("limits", "limits.yaml"),
            ("bench", "bench")} <= kinds
    assert ("board_type", str(tmp_path / "p" / "TT2.yaml")) in kinds
    assert {k for k, _ in kinds if k == "dialect"} == {"dialect"}  # each role's dialect text
    by_name = {i.name: i.text for i in inputs}
    assert by_name["parts/scan.yaml"] == (tmp_path / "p" / "parts" / "scan.yaml").read_text()
    # the definition written in the README: SHA-256 over sorted "<kind> <name> <sha256>\n" lines
    # of the procedure, fragment, limits and board-type texts (hashlib is the reference)
    lines = sorted(
        f"{i.kind} {i.name} {hashlib.sha256(i.text.encode()).hexdigest()}\n"
        for i in inputs if i.kind in ("procedure", "include", "limits", "board_type")
    )
    assert run.procedure_sha256 == hashlib.sha256("".join(lines).encode()).hexdigest()
    assert run.procedure_sha256 == procedure_digest(inputs)


def test_repeat_runs_the_stored_texts_after_an_include_changed(tmp_path: Path, bench) -> None:
    board, db = bench
    proc = _write(tmp_path / "p", points=3)
    assert _invoke("run", str(proc), "--sim", str(board), "--db", db, "--yes")[0] == 0
    _write(tmp_path / "p", points=5)  # the fragment now scans five amplitudes
    (tmp_path / "p" / "limits.yaml").write_text(LIMITS.replace("0.9", "0.2"))
    code, out = _invoke("run", "--repeat", "1", "--sim", str(board), "--db", db, "--yes")
    assert code == 0, out
    with Store.open(db) as store:
        first, again = store.list_runs()
        assert again.repeat_of == first.id
        assert again.procedure_sha256 == first.procedure_sha256
        assert _steps(store, again.id) == _steps(store, first.id)  # three amplitudes, as stored
        lows = {m.low for m in store.measurements(run_id=again.id) if m.quantity == "gain"}
        assert lows == {0.9}  # the stored limit set, not today's
    # a fresh run of the changed text under the same released name and version is refused
    code, out = _invoke("run", str(proc), "--sim", str(board), "--db", db, "--yes")
    assert code == 2
    assert "bump the version" in out
    with Store.open(db) as store:
        assert len(store.list_runs()) == 2


def test_a_changed_draft_runs_with_a_new_hash_and_is_flagged(tmp_path: Path, bench) -> None:
    board, db = bench
    proc = _write(tmp_path / "p", version="1.1-draft", points=3)
    assert _invoke("run", str(proc), "--sim", str(board), "--db", db, "--yes")[0] == 0
    _write(tmp_path / "p", version="1.1-draft", points=4)
    code, out = _invoke("run", str(proc), "--sim", str(board), "--db", db, "--yes")
    assert code == 0, out
    assert "differs from the text stored with run 1" in out
    with Store.open(db) as store:
        first, second = store.list_runs()
        assert second.procedure_sha256 != first.procedure_sha256
        assert store.caveats(first.id) == []
        [caveat] = store.caveats(second.id)
        assert "differs from the text stored with run 1" in caveat
        assert len(_steps(store, second.id)) > len(_steps(store, first.id))


def test_procedure_and_repeat_together_is_an_error(tmp_path: Path, bench) -> None:
    board, db = bench
    proc = _write(tmp_path / "p")
    code, out = _invoke("run", str(proc), "--repeat", "1", "--sim", str(board), "--db", db, "--yes")
    assert code == 2
    assert "not both" in out
    assert not (tmp_path / "r.db").exists()


def test_a_dialect_given_by_path_is_rerun_from_its_stored_text(tmp_path: Path, bench) -> None:
    # issue 16: dialects named by path were read again from disk on --repeat / resume; the run keeps
    # the text it was driven by and a rerun on the same bench is driven by that text again
    import yaml

    from drivers.dialect import shipped_dialect_path
    from drivers.sim import start_sim_bench

    board, db = bench
    proc = _write(tmp_path / "p")
    dialect = tmp_path / "lab" / "scope-dialect.yaml"
    dialect.parent.mkdir()
    original = shipped_dialect_path("generic").read_text(encoding="utf-8")
    dialect.write_text(original, encoding="utf-8")
    with start_sim_bench(board) as sim:
        mapping = sim.bench_mapping()
        mapping["instruments"]["scope"]["dialect"] = str(dialect)
        bench_file = tmp_path / "bench.yaml"
        bench_file.write_text(yaml.safe_dump(mapping, sort_keys=False))
        code, out = _invoke("run", str(proc), "--bench", str(bench_file), "--board", "NR-TT2-0001",
                            "--db", db, "--yes")
        assert code == 0, out
        # the lab edits its dialect file: a repeat on the same bench file says so and uses the stored text
        dialect.write_text(original + "# tuned for the new scope firmware\n", encoding="utf-8")
        code, out = _invoke("run", "--repeat", "1", "--bench", str(bench_file), "--db", db, "--yes")
        assert code == 0, out
        assert f"scope: dialect {dialect} differs from the text run 1 used" in out
        # the file is gone: a repeat on the recorded bench still runs, from the stored text
        dialect.unlink()
        code, out = _invoke("run", "--repeat", "1", "--db", db, "--yes")
        assert code == 0, out
    with Store.open(db) as store:
        runs = store.list_runs()
        assert [r.repeat_of for r in runs] == [None, 1, 1]
        scope_texts = [{i.name: i.text for i in store.run_inputs(r.id) if i.kind == "dialect"}["scope"]
                       for r in runs]
    assert scope_texts == [original, original, original]
