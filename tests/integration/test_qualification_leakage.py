"""procedures/bias-leakage.yaml against simulated boards whose bias-line resistance is known.

Truth: I = V / R (DESIGN.md physics) plus the simulated meter's 0.02 nA offset; tolerance 5 %
(the issue's).  The test voltage is overridden to 10 V (ramps are real time in the simulator).
Also checked: the caution was acknowledged (recorded unattended) and the supply ended at 0 V, off.
"""

from __future__ import annotations

import pytest

from sequencer.store import Store
from tests.integration.qualification_sim import channel, run_shipped, write_board

LEAKAGE_TOLERANCE = 0.05  # the tolerance on leakage
VOLTS = 10.0


@pytest.mark.parametrize(("resistance_Mohm", "verdict"), [(2000.0, "pass"), (400.0, "fail")])
def test_leakage_agrees_with_the_board_file(tmp_path, resistance_Mohm, verdict):
    board = write_board(
        tmp_path, "NR-PA8-T601", [channel(), channel()], bias_resistance_Mohm=resistance_Mohm
    )
    result = run_shipped(
        "bias-leakage", board, tmp_path / "r.db", channels=2, overrides={"volts": f"{VOLTS} V"}
    )
    (m,) = result.measurements
    assert (m.quantity, m.channel, m.output, m.unit) == ("leakage_nA", None, None, "nA")
    assert m.value == pytest.approx(
        VOLTS / resistance_Mohm * 1e3, rel=LEAKAGE_TOLERANCE
    )  # V/MΩ = µA
    assert m.verdict == verdict
    with Store.open(result.db_url) as store:
        kinds = [e.kind for e in store.safety_events(result.run_id)]
    assert "acknowledgement" in kinds
    assert kinds.index("acknowledgement") < kinds.index("ramp_start")
