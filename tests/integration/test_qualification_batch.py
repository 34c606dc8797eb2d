"""The batch workflow (sequencer.batchrun, ``benchwright batch``) on simulated 3-channel boards.

The batch qualifies with the shipped gain-linearity procedure (the quickest), on a 3-channel cut
of the PA8 board type: one healthy board, one with a dead channel.
"""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from sequencer.batchrun import BatchOptions, qualify_batch, summary_text
from sequencer.cli import attach_commands, cli
from sequencer.errors import ConfigError
from sequencer.procedure import load_batch
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, channel, write_board

BOARD_TYPE = """board_type: PA8-3
description: the PA8 board type cut to three channels, for tests
channels: 3
outputs:
  x1: {nominal_gain: 1.0}
  x5: {nominal_gain: 5.0}
  shaped: {}
"""


@pytest.fixture
def scenario(tmp_path):
    sims = tmp_path / "sims"
    write_board(sims, "NR-PA8-T701", [channel(), channel(gain_x1=1.02), channel()], seed=71)
    write_board(sims, "NR-PA8-T702", [channel(), channel(dead=True), channel()], seed=72)
    (tmp_path / "PA8-3.yaml").write_text(BOARD_TYPE)
    batch = tmp_path / "batch.yaml"
    batch.write_text(
        f"batch: NR-TEST-B1\nprocedure: {PROCEDURES / 'gain-linearity.yaml'}\n"
        f"board_type: {tmp_path / 'PA8-3.yaml'}\noperator: T. Tester\n"
        "boards:\n  - serial: NR-PA8-T701\n  - serial: NR-PA8-T702\n"
    )
    return tmp_path, load_batch(batch), f"sqlite:///{tmp_path / 'results.db'}"


def _options(sims, lines, **kw):
    return BatchOptions(
        sim_dir=str(sims), unattended=True, echo=lines.append, handle_signals=False, **kw
    )


def test_batch_qualifies_each_board_with_a_running_yield(scenario):
    folder, batch, url = scenario
    lines: list[str] = []
    with Store.open(url) as store:
        outcome = qualify_batch(batch, store, _options(folder / "sims", lines))
        runs = store.runs_of_batch("NR-TEST-B1")
        text = summary_text(store, "NR-TEST-B1")
    assert [(b.serial, b.status, b.passed, b.channels) for b in outcome.boards] == [
        ("NR-PA8-T701", "passed", 3, 3),
        ("NR-PA8-T702", "failed", 2, 3),
    ]
    assert outcome.exit_code() == 1
    assert [r.board for r in runs] == ["NR-PA8-T701", "NR-PA8-T702"]
    assert {r.operator for r in runs} == {"T. Tester"}
    assert "running yield 3/3 channels (100.0 %)" in lines[0]
    assert "running yield 5/6 channels (83.3 %)" in lines[1]
    assert "NR-PA8-T702" in text and "gain x1" in text  # the failed channel with its quantity


def test_qualified_boards_are_skipped_unless_requalify(scenario):
    folder, batch, url = scenario
    lines: list[str] = []
    with Store.open(url) as store:
        qualify_batch(batch, store, _options(folder / "sims", lines))
        again = qualify_batch(batch, store, _options(folder / "sims", lines))
        assert len(store.runs_of_batch("NR-TEST-B1")) == 2
        # T702 failed: reported as failed again (issue 22), not "already qualified"
        assert [b.status for b in again.boards] == ["skipped", "failed"]
        assert "--requalify" in again.boards[1].note
        assert again.passed == 5 and again.channels == 6  # the yield still counts them
        forced = qualify_batch(batch, store, _options(folder / "sims", lines, requalify=True))
        assert [b.status for b in forced.boards] == ["passed", "failed"]
        assert len(store.runs_of_batch("NR-TEST-B1")) == 4


def test_operator_can_skip_and_stop(scenario):
    folder, batch, url = scenario
    asked: list[str] = []

    def mount(board, index, count):
        asked.append(f"{board.serial} {index}/{count}")
        return "skip" if index == 1 else "stop"

    options = BatchOptions(
        sim_dir=str(folder / "sims"),
        unattended=False,
        mount=mount,
        echo=lambda line: None,
        handle_signals=False,
    )
    with Store.open(url) as store:
        outcome = qualify_batch(batch, store, options)
        assert store.runs_of_batch("NR-TEST-B1") == []
    assert asked == ["NR-PA8-T701 1/2", "NR-PA8-T702 2/2"]
    assert [b.status for b in outcome.boards] == ["not run", "not run"]
    assert outcome.stopped and outcome.exit_code() == 3


def test_entry_sim_board_wins_and_a_missing_board_file_is_bad_input(scenario):
    folder, _, url = scenario
    batch_file = folder / "batch2.yaml"
    batch_file.write_text(
        f"batch: NR-TEST-B2\nprocedure: {PROCEDURES / 'gain-linearity.yaml'}\n"
        f"board_type: {folder / 'PA8-3.yaml'}\noperator: T. Tester\nboards:\n"
        "  - {serial: NR-PA8-T701, sim_board: sims/NR-PA8-T702.yaml}\n  - serial: NR-PA8-T799\n"
    )
    lines: list[str] = []
    with Store.open(url) as store, pytest.raises(ConfigError) as exc:
        qualify_batch(load_batch(batch_file), store, _options(folder / "sims", lines))
    # every board file is checked before the first board: none was run, T799's file is named
    assert lines == [] and store.runs_of_batch("NR-TEST-B2") == []
    assert "NR-PA8-T799" in str(exc.value.problems[0])


def test_batch_command(scenario):
    folder, _, url = scenario
    attach_commands()
    result = CliRunner().invoke(
        cli,
        [
            "batch",
            str(folder / "batch.yaml"),
            "--sim-dir",
            str(folder / "sims"),
            "--yes",
            "--db",
            url,
        ],
    )
    assert result.exit_code == 1, result.output  # a value outside its limits
    assert "[2/2] NR-PA8-T702: FAILED" in result.output
    assert "yield" in result.output
    bad = CliRunner().invoke(cli, ["batch", str(folder / "batch.yaml"), "--db", url])
    assert bad.exit_code == 2  # neither --bench nor --sim-dir
