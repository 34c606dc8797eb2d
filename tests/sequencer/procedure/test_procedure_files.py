"""Board-type, limits and batch files."""

from __future__ import annotations

from pathlib import Path

import pytest

from sequencer.errors import ProcedureError
from sequencer.procedure import QUANTITY_UNITS, board_info, load_batch, load_board_type, load_limits
from sequencer.procedure.kinds import KINDS

ROOT = Path(__file__).resolve().parents[3]


def test_pa8_board_type():
    board = load_board_type("PA8")
    assert (board.board_type, board.channels, board.outputs) == ("PA8", 8, ("x1", "x5", "shaped"))
    assert board.nominal_gain == {"x1": 1.0, "x5": 5.0}
    assert board.serial == ""
    assert board_info(board, "NR-PA8-0007").serial == "NR-PA8-0007"
    assert board_info(ROOT / "procedures/boards/PA8.yaml", "NR-PA8-0001").channels == 8


def test_quantity_table_matches_the_analysis_kinds():
    produced = {q for kind in KINDS.values() for q in kind.produces}
    assert produced == set(QUANTITY_UNITS)


def test_pa8_limits():
    board = load_board_type("PA8")
    limits = {
        (lim.quantity, lim.output): lim for lim in load_limits(ROOT / "procedures/limits/PA8.yaml")
    }
    for output, nominal in board.nominal_gain.items():
        gain = limits[("gain", output)]  # ±5 % of nominal (common practice)
        assert (gain.low, gain.high) == pytest.approx((nominal * 0.95, nominal * 1.05))
    # CR-RC^n unipolar peaking time n·tau (Spieler 2005 ch. 4): 4 x 50 ns = 200 ns, ±10 %
    peaking = limits[("peaking_time_ns", "shaped")]
    assert (peaking.low, peaking.high) == pytest.approx((0.9 * 4 * 50, 1.1 * 4 * 50))
    assert (limits[("offset_mV", None)].low, limits[("offset_mV", None)].high) == (-10, 10)
    assert limits[("inl_pct", None)].high == 0.5 and limits[("inl_pct", None)].low is None
    assert limits[("leakage_nA", None)].judge(20.0) == "pass"  # inclusive bound
    assert limits[("leakage_nA", None)].judge(20.01) == "fail"
    for lim in limits.values():
        assert lim.unit == QUANTITY_UNITS[lim.quantity]
        assert "common practice" in lim.reason


def test_limits_errors_located(tmp_path: Path):
    path = tmp_path / "L.yaml"
    path.write_text(
        "board_type: PA8\nlimits:\n  - {quantity: gain, low: 0.9, high: 1.1, unit: V/V}\n"
        "  - {quantity: gain, low: 0, unit: V/V}\n  - {quantity: noise_in_mV, unit: mV, hihg: 1}\n"
        '  - {quantity: inl_pct, low: 2, high: 1, unit: "%"}\n'
    )
    with pytest.raises(ProcedureError) as exc:
        load_limits(path)
    assert [str(p) for p in exc.value.problems] == [
        f"{path}:4:5: second limit for gain (first at line 3)",
        f"{path}:5:39: unknown key 'hihg' in a limit (did you mean 'high'?)",
        f"{path}:6:30: low 2.0 is above high 1.0",
    ]


def test_batch_file(tmp_path: Path):
    path = tmp_path / "batch.yaml"
    path.write_text(
        "batch: NR-2025-W27\nprocedure: ../procedures/q.yaml\nboard_type: PA8\noperator: A. Example\n"
        "boards:\n  - serial: NR-PA8-0001\n    sim_board: sim/NR-PA8-0001.yaml\n"
        "  - {serial: NR-PA8-0002, operator: B. Example}\n"
    )
    batch = load_batch(path)
    assert batch.name == "NR-2025-W27"
    assert batch.procedure == str(tmp_path / "../procedures/q.yaml")
    first, second = batch.boards
    assert (first.serial, first.board_type, first.operator) == ("NR-PA8-0001", "PA8", "A. Example")
    assert first.sim_board == str(tmp_path / "sim/NR-PA8-0001.yaml")
    assert (second.operator, second.sim_board) == ("B. Example", None)


def test_batch_errors_located(tmp_path: Path):
    path = tmp_path / "batch.yaml"
    path.write_text(
        "batch: b\nprocedure: q.yaml\nboards:\n  - serial: NR-1\n  - serial: NR-1\n"
        "  - {serail: NR-2, operator: x, board_type: PA8}\n"
    )
    with pytest.raises(ProcedureError) as exc:
        load_batch(path)
    messages = [str(p) for p in exc.value.problems]
    assert f"{path}:4:5: board needs a board_type (here or at the top of the batch)" in messages
    assert f"{path}:6:6: unknown key 'serail' in a batch board (did you mean 'serial'?)" in messages
    assert f"{path}:6:5: a batch board needs 'serial'" in messages


def test_batch_parameters_and_a_boards_own_procedure(tmp_path: Path):
    path = tmp_path / "batch.yaml"
    path.write_text(
        "batch: NR-T\nprocedure: coincidence-unit.yaml\nboard_type: IDC4\noperator: A\n"
        "parameters: {delays: 21, window: 25 ns}\n"
        "boards:\n  - serial: NR-1\n  - serial: NR-2\n    board_type: DGZ4\n"
        "    procedure: digitizer.yaml\n    parameters: {hist_points: 200000, amplitudes: [1, 2]}\n"
    )
    batch = load_batch(path)
    first, second = batch.boards
    assert batch.procedure_of(first) == str(tmp_path / "coincidence-unit.yaml")
    assert batch.procedure_of(second) == str(tmp_path / "digitizer.yaml")
    assert batch.parameters_of(first) == {"delays": 21, "window": "25 ns"}
    # a board with its own procedure takes only its own parameters
    assert batch.parameters_of(second) == {"hist_points": 200000, "amplitudes": [1, 2]}


def test_batch_parameters_errors_located(tmp_path: Path):
    path = tmp_path / "batch.yaml"
    path.write_text(
        "batch: b\nprocedure: q.yaml\nboard_type: PA8\noperator: A\nparameters: [1, 2]\n"
        "boards:\n  - {serial: NR-1, parameters: {points: true, top: {a: 1}, n: []}}\n"
    )
    with pytest.raises(ProcedureError) as exc:
        load_batch(path)
    messages = [str(p) for p in exc.value.problems]
    assert f"{path}:5:13: parameters: needs a mapping such as {{points: 6}}" in messages
    for key in ("points", "top", "n"):
        assert any(
            m.startswith(f"{path}:7:") and f"parameters: {key!r} needs a text" in m
            for m in messages
        ), key
