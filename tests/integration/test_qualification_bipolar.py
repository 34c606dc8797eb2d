"""procedures/bipolar-zero-crossing.yaml against simulated PA8 boards whose shapers are known.

Truth: a bipolar CR²-RCⁿ shaper crosses zero at (n+1)·τ after the pulse onset, whatever the
amplitude (REFERENCES.md "Shaping amplifiers", Spieler 2005 ch. 4; the simulator plays it, DESIGN.md).
Tolerances (ours): 2 % of the crossing (500 MS/s samples, 2 ns apart, interpolated; a fitted
onset), walk below the 1 ns limit.  A unipolar shaper has no crossing: refused, never a time.

The plan is built as the command line builds it (``compose.plan_for``), so the procedure's own
limit set (``limits: PA8-bipolar``, not a board type) is the one that judges.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from sequencer import compose
from sequencer.procedure import load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-pa8-bipolar.yaml"


def board_file(folder: Path, serial: str, **shaper: object) -> Path:
    data = yaml.safe_load(EXAMPLE.read_text())
    data["serial"] = serial
    data["shaper"].update(shaper)
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def run(board: Path, db: Path, procedure: str = "bipolar-zero-crossing.yaml") -> list:
    serial = yaml.safe_load(board.read_text())["serial"]
    plan = compose.plan_for(
        load_procedure(PROCEDURES / procedure), serial
    )
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{db}") as store:
        with compose.bench_for(None, str(board)) as spec:
            result = compose.execute(plan, spec, store, request)
        return store.measurements(run_id=result.run_id)


@pytest.mark.parametrize("order,tau", [(4, 50.0), (2, 80.0)])
def test_zero_crossing_at_n_plus_one_tau_whatever_the_amplitude(tmp_path, order, tau):
    ms = run(board_file(tmp_path, "NR-PA8-9101", order=order, tau_ns=tau), tmp_path / "r.db")
    crossing = [m for m in ms if m.quantity == "zero_crossing_ns"]
    walk = [m for m in ms if m.quantity == "zero_crossing_walk_ns"]
    assert len(crossing) == len(walk) == 8  # every channel
    for m in crossing:
        assert m.value == pytest.approx((order + 1) * tau, rel=0.02)
    assert all(m.value < 1.0 for m in walk), [m.value for m in walk]
    if (order, tau) == (4, 50.0):  # the design the PA8-bipolar limits are for
        assert all(m.verdict == "pass" and m.low == 237.5 for m in crossing)
        assert all(m.verdict == "pass" and m.high == 1.0 for m in walk)


def test_a_unipolar_shaper_is_refused_with_the_reason(tmp_path):
    ms = run(board_file(tmp_path, "NR-PA8-9102", kind="unipolar"), tmp_path / "r.db")
    refused = [m for m in ms if m.quantity == "zero_crossing_ns"]
    assert refused and all(not m.measured and m.verdict == "fail" for m in refused)
    assert all("no zero crossing" in m.reason for m in refused)


def test_a_procedures_own_limit_set_is_kept_for_the_runs_board_type(tmp_path):
    # limits: PA8-shaper is not a board type: the run of a PA8 board keeps it (it used to be
    # swapped for the PA8 set, leaving the charge quantities unjudged)
    plan = compose.plan_for(load_procedure(PROCEDURES / "shaper-adc.yaml"), "NR-PA8-0001")
    assert plan.limit_for("charge_gain_mV_per_fC", "shaped") is not None
    plan = compose.plan_for(
        load_procedure(PROCEDURES / "qualify-preamp.yaml"), "NR-PA8N-0001", board_type="PA8N"
    )
    # named by the procedure's type: swapped for the run's type's set
    assert "@limits/PA8N.yaml" in [i.name for i in plan.inputs if i.kind == "limits"]
    assert plan.limit_for("baseline_mV", "x1") is not None
