"""procedures/coincidence-unit.yaml against simulated IDC4 modules whose coincidence units are known.

Truth (drivers/sim/coincidence.py): a coincidence is |t2 - t1| < tau, tau = window set + the board's
``resolving_extra_ns``, so the delay curve is 2 tau wide (tau = FWHM/2); correlated pulser pairs at
10 kHz count on the plateau with efficiency1 x efficiency2; independent random inputs give accidentals
at R_acc = 2·tau·R1·R2 (REFERENCES.md, standard).  Tolerances (ours): tau within 1 ns (2 ns scan
steps, 0.5 ns jitter per input), efficiency within 1.5 points (1000 pairs per gate, several plateau
points), accidental ratio within 4 sigma of its ~320 counts.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
import yaml

from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.reports.certificate_data import gather_certificates
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-idc4.yaml"


def module_file(folder: Path, serial: str, **coincidence: float) -> Path:
    data = yaml.safe_load(EXAMPLE.read_text())
    data["serial"] = serial
    data["coincidence"].update(coincidence)
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def run_module(board_file: Path, db: Path) -> tuple[int, dict[str, object], str]:
    serial = yaml.safe_load(board_file.read_text())["serial"]
    procedure = load_procedure(PROCEDURES / "coincidence-unit.yaml")
    board = dataclasses.replace(load_board_type("IDC4"), serial=serial)
    plan = build_plan(procedure, board)
    url = f"sqlite:///{db}"
    request = compose.RunRequest(
        operator="test",
        unattended=True,
        progress=False,
        handle_signals=False,
    )
    with Store.open(url) as store:
        with compose.bench_for(None, str(board_file)) as spec:
            result = compose.execute(plan, spec, store, request)
        values = {m.quantity: m for m in store.measurements(run_id=result.run_id)}
        certificates = gather_certificates(store, result.run_id)
    return result.outcome.failed, values, certificates[0].number if certificates else ""


@pytest.fixture(scope="module")
def healthy(tmp_path_factory):
    folder = tmp_path_factory.mktemp("coinc")
    return run_module(module_file(folder, "NR-IDC4-9001"), folder / "r.db")


@pytest.fixture(scope="module")
def wide(tmp_path_factory):
    folder = tmp_path_factory.mktemp("coinc-wide")
    board = module_file(
        folder, "NR-IDC4-9002", resolving_extra_ns=12.0, efficiency1=0.9, output_width_ns=14.0
    )
    return run_module(board, folder / "r.db")


def test_healthy_unit_measures_its_window_and_passes(healthy):
    failed, values, number = healthy
    assert values["resolving_time_ns"].value == pytest.approx(20.0, abs=1.0)  # the window set
    assert values["coincidence_plateau_hz"].value == pytest.approx(10e3, rel=0.01)
    assert values["coincidence_efficiency_pct"].value == pytest.approx(100.0, abs=1.5)
    ratio = values["accidental_ratio"]
    assert ratio.value == pytest.approx(1.0, abs=4 * ratio.uncertainty)
    assert failed == 0 and all(m.verdict in ("pass", "info") for m in values.values())
    # the unit's logic output: 10 ns wide between its 50 % crossings (the board's default)
    assert values["coincidence_width_ns"].value == pytest.approx(10.0, abs=0.05)
    assert number.endswith("NR-IDC4-9001-CH00")  # one certificate for the module as a whole


def test_wide_resolving_time_and_lost_pairs_fail(wide):
    failed, values, _ = wide
    tau = values["resolving_time_ns"]
    assert tau.value == pytest.approx(32.0, abs=1.0) and tau.verdict == "fail"
    eff = values["coincidence_efficiency_pct"]
    assert eff.value == pytest.approx(90.0, abs=1.5) and eff.verdict == "fail"
    # the accidentals follow the true tau, which the delay curve measured: still about 1
    ratio = values["accidental_ratio"]
    assert ratio.value == pytest.approx(1.0, abs=4 * ratio.uncertainty)
    # the output pulse: 14 ns against 9..11 ns (IEEE 181 duration at 50 %, linear edges)
    width = values["coincidence_width_ns"]
    assert width.value == pytest.approx(14.0, abs=0.05) and width.verdict == "fail"
    assert failed == 3
