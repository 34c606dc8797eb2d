"""procedures/gain-linearity.yaml against simulated boards whose gains are known.

Truth: the board file's small-signal gains (tolerance 1 %, the issue's).  The saturating channel is
checked against an independent model of the same scan: numpy.polyfit of S·tanh(g·A/S) (DESIGN.md
physics) over the scan's amplitudes gives the slope and best-fit INL the procedure should see.
"""

from __future__ import annotations

import numpy as np
import pytest

from sequencer.procedure import build_plan, load_procedure
from tests.integration.qualification_sim import (
    PROCEDURES,
    channel,
    run_shipped,
    small_board,
    write_board,
)

GAIN_TOLERANCE = 0.01  # the tolerance on gain
BOARD = [
    channel(gain_x1=0.97, gain_x5=5.10),
    channel(gain_x1=1.03, gain_x5=4.88, baseline_mV=-0.3),
    channel(gain_x1=1.00, gain_x5=5.00, saturation_mV=300),  # saturates early
]


def _model_fit(gain: float, nominal: float, saturation: float, top: float = 160.0, points: int = 8):
    """Slope and best-fit INL (% of the fitted span, IEEE 1241) of the noiseless tanh scan."""
    amps = np.linspace(top / points / nominal, top / nominal, points)
    heights = saturation * np.tanh(gain * amps / saturation)
    slope, intercept = np.polyfit(amps, heights, 1)
    residuals = heights - (slope * amps + intercept)
    return slope, 100 * np.abs(residuals).max() / (slope * (amps.max() - amps.min()))


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    folder = tmp_path_factory.mktemp("gain")
    board = write_board(folder, "NR-PA8-T101", BOARD, seed=21)
    return run_shipped("gain-linearity", board, folder / "r.db", channels=3)


@pytest.mark.parametrize("ch", [1, 2])
@pytest.mark.parametrize("output", ["x1", "x5"])
def test_gain_agrees_with_the_board_file(result, ch, output):
    truth = BOARD[ch - 1][f"gain_{output}"]
    m = result.values("gain")[(ch, output, None)]
    assert m.value == pytest.approx(truth, rel=GAIN_TOLERANCE)
    assert m.verdict == "pass"
    assert m.unit == "V/V"


@pytest.mark.parametrize("ch", [1, 2])
def test_healthy_channels_pass_offset_and_inl(result, ch):
    for output in ("x1", "x5"):
        inl = result.values("inl_pct")[(ch, output, None)]
        offset = result.values("offset_mV")[(ch, output, None)]
        # baseline is subtracted; what is left is the intercept of the soft compression (< 1 mV)
        assert abs(offset.value) < 1.0
        assert inl.value < 0.3 and inl.verdict == "pass"


def test_saturating_channel_fails_gain_and_inl_as_the_model_predicts(result):
    for output, nominal in (("x1", 1.0), ("x5", 5.0)):
        slope, inl = _model_fit(BOARD[2][f"gain_{output}"], nominal, 300.0)
        assert nominal * 0.95 > slope  # the model itself is outside the ±5 % gain limit
        gain = result.values("gain")[(3, output, None)]
        inl_m = result.values("inl_pct")[(3, output, None)]
        assert gain.value == pytest.approx(slope, rel=0.01)
        assert inl_m.value == pytest.approx(inl, rel=0.2)
        assert gain.verdict == "fail" and inl_m.verdict == "fail"
    assert result.failed == 4


def test_the_scan_repeats_identically(tmp_path):
    """The week after: the same plan, step for step, and the same figures from the same board."""
    procedure = load_procedure(PROCEDURES / "gain-linearity.yaml")
    first = build_plan(procedure, small_board("NR-PA8-T102", 2))
    again = build_plan(
        load_procedure(PROCEDURES / "gain-linearity.yaml"), small_board("NR-PA8-T102", 2)
    )
    assert [(s.path, dict(s.args)) for s in first.steps] == [
        (s.path, dict(s.args)) for s in again.steps
    ]
    assert first.sha256 == again.sha256
    board = write_board(tmp_path, "NR-PA8-T102", BOARD[:2], seed=5)
    runs = [run_shipped("gain-linearity", board, tmp_path / f"r{i}.db", channels=2) for i in (1, 2)]
    values = [[(m.path, m.quantity, m.value) for m in r.measurements] for r in runs]
    assert values[0] == values[1]  # seeded simulator: same seed, same noise (DESIGN.md)


def test_repeat_reruns_the_stored_text_with_its_fragments(tmp_path):
    """``benchwright run --repeat`` replays the stored procedure and its included fragments."""
    from click.testing import CliRunner

    from sequencer.cli import cli
    from sequencer.store import Store
    from tests.integration.qualification_sim import ROOT

    board = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
    db = f"sqlite:///{tmp_path / 'r.db'}"
    first = CliRunner().invoke(
        cli,
        ["run", str(PROCEDURES / "gain-linearity.yaml"), "--sim", str(board), "--db", db, "--yes"],
    )
    again = CliRunner().invoke(
        cli, ["run", "--repeat", "1", "--sim", str(board), "--db", db, "--yes"]
    )
    assert (first.exit_code, again.exit_code) == (0, 0), first.output + again.output
    with Store.open(db) as store:
        runs = store.list_runs()
        values = [[(m.path, m.value) for m in store.measurements(run_id=r.id)] for r in runs]
    assert runs[1].repeat_of == runs[0].id
    assert runs[0].procedure_sha256 == runs[1].procedure_sha256
    assert values[0] == values[1] and len(values[0]) == 8 * 2 * 3
