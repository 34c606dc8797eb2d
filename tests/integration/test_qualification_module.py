"""procedures/module-cosmics.yaml on simulated scintillator modules whose truth is known.

Truth (drivers/sim/cosmics.py): vertical muons at area × 1/cm²/min (PDG "Cosmic rays", from memory),
light at sensor i with its Landau mode at mpv_pe · exp(-fibre_i/λ_att) · light_scale_i primary
photoelectrons.  Tolerance of issue 17 on light yield: 5 %.  Accidentals against R_acc = 2τR₁R₂
(standard; Leo, from memory).  The bias ramps are real time: slow.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import pytest
import yaml

from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES

pytestmark = pytest.mark.slow

MPV, ATTENUATION_CM, FIBRE_CM = 30.0, 300.0, (50.0, 80.0)


def write_module(folder: Path, serial: str, *, light_scale: float) -> Path:
    sipm = {
        "breakdown_V": 51.2,
        "cell_capacitance_fF": 100.0,
        "dark_rate_hz_per_V": 50000.0,
        "crosstalk_lambda_per_V": 0.035,
    }
    data: dict[str, Any] = {
        "serial": serial,
        "sensor_type": "SM2",
        "seed": 41,
        "readout": {"mV_per_fC": 0.05, "noise_mV": 1.0},
        "sensors": [sipm, {**sipm, "light_scale": light_scale}],
        "plate": {
            "area_cm2": 400.0,
            "mpv_pe": MPV,
            "landau_width_pe": 3.0,
            "attenuation_length_cm": ATTENUATION_CM,
            "fibre_cm": list(FIBRE_CM),
            "singles_rate_hz": [1000, 1000],
        },
    }
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def run(module: Path, db: Path) -> list[Any]:
    serial = yaml.safe_load(module.read_text())["serial"]
    procedure = load_procedure(PROCEDURES / "module-cosmics.yaml")
    board = dataclasses.replace(load_board_type("SM2"), serial=serial)
    plan = build_plan(procedure, board)
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{db}") as store:
        with compose.bench_for(None, str(module)) as spec:
            result = compose.execute(plan, spec, store, request)
        return list(store.measurements(run_id=result.run_id))


def _by(ms: list[Any], quantity: str, channel: int | None = None) -> Any:
    (m,) = [m for m in ms if m.quantity == quantity and m.channel == channel]
    return m


def test_module_light_yield_rate_and_accidentals(tmp_path: Path) -> None:
    ms = run(write_module(tmp_path, "LX-M2-T001", light_scale=1.0), tmp_path / "r.db")
    for channel, fibre in zip((1, 2), FIBRE_CM, strict=True):
        truth = MPV * math.exp(-fibre / ATTENUATION_CM)
        assert _by(ms, "light_yield_pe", channel).value == pytest.approx(truth, rel=0.05)
    eff = _by(ms, "muon_efficiency_pct")
    assert abs(eff.value - 100.0) < 4 * eff.uncertainty  # every muon fires both at 3.3 p.e.
    acc = _by(ms, "accidental_ratio")
    assert abs(acc.value - 1.0) < 4 * acc.uncertainty
    assert all(m.verdict in ("pass", "info") for m in ms)


def test_poorly_coupled_fibre_gives_low_light_and_fails(tmp_path: Path) -> None:
    ms = run(write_module(tmp_path, "LX-M2-T002", light_scale=0.45), tmp_path / "r.db")
    low = _by(ms, "light_yield_pe", 2)
    assert low.value == pytest.approx(0.45 * MPV * math.exp(-80.0 / 300.0), rel=0.08)
    assert low.verdict == "fail"
    assert _by(ms, "light_yield_pe", 1).verdict == "pass"
