"""procedures/sipm-characterise.yaml on simulated SiPMs whose truth is known (the sensor file).

Truth (drivers/sim/sipm.py): V_bd(T) = V_bd + k·(T - 25 °C); G = C·(V - V_bd(T))/e; DCR = r·(V - V_bd);
P_ct = 1 - exp(-λ), λ = l·(V - V_bd) (Vinogradov arXiv:1109.2014).  Tolerances of issue 17: V_bd
0.1 V, gain 2 %, DCR 10 %, crosstalk 2 percentage points.  Ramps are real time (10 V/s): slow.
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

E = 1.602176634e-19  # C, SI
OPERATING_V = 54.3  # the procedure's operating point


def write_sensor(
    folder: Path, serial: str, *, breakdown_V: float, temperature_C: float, **readout: Any
) -> Path:
    data: dict[str, Any] = {
        "serial": serial,
        "sensor_type": "SiPM3",
        "seed": 23,
        "temperature_C": temperature_C,
        "readout": {"mV_per_fC": 0.05, "noise_mV": 1.0, **readout},
        "led": {"pe_per_V": 1.5, "threshold_V": 0.5},
        "sensors": [
            {
                "breakdown_V": breakdown_V,
                "reference_C": 25.0,
                "breakdown_coeff_mV_per_K": 54.0,
                "cell_capacitance_fF": 100.0,
                "dark_rate_hz_per_V": 40000.0,
                "crosstalk_lambda_per_V": 0.04,
            }
        ],
    }
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def run(
    sensor: Path, db: Path, certificates: Path | None = None, **overrides: Any
) -> dict[str, Any]:
    serial = yaml.safe_load(sensor.read_text())["serial"]
    procedure = load_procedure(PROCEDURES / "sipm-characterise.yaml")
    board = dataclasses.replace(load_board_type("SiPM3"), serial=serial)
    plan = build_plan(procedure, board, overrides={"events": 6000, **overrides})
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{db}") as store:
        with compose.bench_for(None, str(sensor)) as spec:
            result = compose.execute(plan, spec, store, request)
        if certificates is not None:
            certify(store, result.run_id, certificates)
        return {m.quantity: m for m in store.measurements(run_id=result.run_id)}


def certify(store: Any, run_id: int, out: Path) -> None:
    """The sensor's certificate carries its spectra and gain scan as stored, and verifies."""
    from sequencer.reports import certify_run, gather_certificates
    from sequencer.reports.verify import verify_certificate

    (data,) = gather_certificates(store, run_id)
    labels = [s.label for s in data.spectra]
    assert labels == ["gain scan", "LED finger spectrum", "dark-count staircase"]
    finger = data.spectra[1]
    assert len(finger.edges) == len(finger.counts) + 1 == len(finger.model) + 1
    assert sum(finger.model) == pytest.approx(sum(finger.counts), rel=0.02)  # the fit holds them
    pdf = next(p for p in map(Path, certify_run(store, run_id, out)) if p.suffix == ".pdf")
    assert verify_certificate(store, pdf).ok


def test_characterisation_recovers_the_sensor_file(tmp_path: Path) -> None:
    ms = run(
        write_sensor(tmp_path, "LX-S3-T001", breakdown_V=51.2, temperature_C=28.0),
        tmp_path / "r.db",
    )
    v_bd_t = 51.2 + 0.054 * 3.0
    over = OPERATING_V - v_bd_t
    assert abs(ms["breakdown_V"].value - v_bd_t) < 0.1
    assert abs(ms["breakdown_ref_V"].value - 51.2) < 0.1
    assert ms["sipm_gain"].value == pytest.approx(100e-15 * over / E / 1e6, rel=0.02)
    assert ms["dcr_kHz"].value == pytest.approx(40.0 * over, rel=0.10)
    expected_ct = 100.0 * (1.0 - math.exp(-0.04 * over))
    assert abs(ms["optical_crosstalk_pct"].value - expected_ct) < 2.0
    assert abs(ms["mean_pe"].value - 1.2) < 4 * ms["mean_pe"].uncertainty
    assert all(m.verdict == "pass" for m in ms.values() if m.low is not None or m.high is not None)


def test_a_sensor_whose_breakdown_is_off_fails(tmp_path: Path) -> None:
    ms = run(
        write_sensor(tmp_path, "LX-S3-T002", breakdown_V=52.3, temperature_C=25.0),
        tmp_path / "r.db",
    )
    assert abs(ms["breakdown_ref_V"].value - 52.3) < 0.1
    assert ms["breakdown_ref_V"].verdict == "fail"


def test_negative_readout_with_a_baseline(tmp_path: Path) -> None:
    # other physics: pulses going down from a 3 mV baseline; thresholds below it, range mirrored
    sensor = write_sensor(
        tmp_path,
        "LX-S3-T003",
        breakdown_V=51.2,
        temperature_C=25.0,
        polarity="negative",
        baseline_mV=3.0,
    )
    ms = run(
        sensor,
        tmp_path / "r.db",
        polarity="negative",
        mca_lower="-200 mV",
        mca_upper="10 mV",
        thresholds=[f"{-1.5 - 1.5 * i:.1f} mV" for i in range(33)],
    )
    over = OPERATING_V - 51.2
    assert abs(ms["breakdown_ref_V"].value - 51.2) < 0.1
    assert ms["sipm_gain"].value == pytest.approx(100e-15 * over / E / 1e6, rel=0.02)
    assert ms["pe_gain_mV"].value < 0 and ms["pedestal_mV"].value == pytest.approx(3.0, abs=0.1)
    assert ms["dcr_kHz"].value == pytest.approx(40.0 * over, rel=0.10)
    assert abs(ms["optical_crosstalk_pct"].value - 100.0 * (1.0 - math.exp(-0.04 * over))) < 2.0
