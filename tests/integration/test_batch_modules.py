"""A batch of modules measured as a whole or of another type than the batch's (issue 18, demo).

A coincidence unit's values belong to the module, not to a channel: the batch counts the module
once ("1/1 channels"), a failing module value fails the board, and the board line prints no empty
parenthesis.  A board may name its own procedure and parameters; the run keeps the parameters used.
Module files give their channels as a count (``channels: 4``).

Truth (drivers/sim/coincidence.py): tau = window set + ``resolving_extra_ns``; the IDC4 limits
accept 18..22 ns for the 20 ns window (procedures/limits/IDC4.yaml, common practice).  A missing
code has DNL −1 (IEEE Std 1241 histogram test, clause from memory).
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from sequencer.batchrun import BatchOptions, qualify_batch
from sequencer.procedure import load_batch
from sequencer.reports import batch_summary
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

IDC4 = ROOT / "drivers" / "sim" / "boards" / "example-idc4.yaml"
DGZ4 = ROOT / "drivers" / "sim" / "boards" / "example-dgz4.yaml"


def _module(folder: Path, example: Path, serial: str, section: str, **changes: object) -> None:
    data = yaml.safe_load(example.read_text())
    data["serial"] = serial
    data["channels"] = len(data["channels"])  # the count alone
    data[section].update(changes)
    (folder / f"{serial}.yaml").write_text(yaml.safe_dump(data, sort_keys=False))


@pytest.fixture(scope="module")
def batch_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("modules")
    _module(folder, IDC4, "NR-IDC4-T801", "coincidence")
    _module(folder, IDC4, "NR-IDC4-T802", "coincidence", resolving_extra_ns=8.0)
    _module(folder, DGZ4, "NR-DGZ4-T803", "converter", missing_codes=[300], dnl_rms_lsb=0.0)
    (folder / "batch.yaml").write_text(
        f"batch: NR-TEST-M1\nprocedure: {PROCEDURES / 'coincidence-unit.yaml'}\n"
        "board_type: IDC4\noperator: T. Tester\n"
        "parameters: {delays: 33, random_gates: 2}\n"
        "boards:\n  - serial: NR-IDC4-T801\n  - serial: NR-IDC4-T802\n"
        f"  - {{serial: NR-DGZ4-T803, board_type: DGZ4, procedure: {PROCEDURES / 'digitizer.yaml'},"
        " parameters: {fit_points: 16384, hist_points: 200000}}\n"
    )
    lines: list[str] = []
    options = BatchOptions(
        sim_dir=str(folder), unattended=True, echo=lines.append, handle_signals=False
    )
    with Store.open(f"sqlite:///{folder / 'r.db'}") as store:
        outcome = qualify_batch(load_batch(folder / "batch.yaml"), store, options)
        runs = {r.board: r for r in store.runs_of_batch("NR-TEST-M1")}
        summary = batch_summary(store, "NR-TEST-M1")
    return outcome, lines, runs, summary


def test_a_module_measured_as_a_whole_counts_once_and_fails_on_its_own_values(batch_run):
    outcome, lines, _, _ = batch_run
    statuses = [(b.serial, b.status, b.passed, b.channels) for b in outcome.boards]
    assert statuses == [
        ("NR-IDC4-T801", "passed", 1, 1),
        ("NR-IDC4-T802", "failed", 0, 1),  # resolving time 28 ns against 18..22 ns
        ("NR-DGZ4-T803", "failed", 0, 4),  # one converter: the missing code on every input
    ]
    assert "PASSED (run 1, 1/1 channels passed)" in lines[0]
    assert all(", )" not in line and "()" not in line for line in lines)


def test_each_board_runs_its_own_procedure_with_the_parameters_kept(batch_run):
    _, _, runs, _ = batch_run
    assert runs["NR-IDC4-T801"].procedure == "coincidence-unit"
    assert runs["NR-IDC4-T801"].parameters["delays"] == 33  # the batch's parameters
    digitizer = runs["NR-DGZ4-T803"]
    assert digitizer.procedure == "digitizer"
    assert digitizer.parameters["hist_points"] == 200000  # the board's own
    assert "delays" not in digitizer.parameters  # the batch's were for the batch's procedure


def test_the_summary_names_the_failing_module_as_a_whole(batch_run):
    _, _, _, summary = batch_run
    assert (summary.channels, summary.passed) == (6, 1)
    (module,) = [f for f in summary.failed if f.board == "NR-IDC4-T802"]
    assert module.channel == 0 and module.reasons[0].startswith("resolving_time_ns")
    assert "NR-IDC4-T802  " in summary.to_text() and " module " in summary.to_text()
