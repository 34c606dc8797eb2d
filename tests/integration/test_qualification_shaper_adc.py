"""procedures/shaper-adc.yaml against a simulated PA8 board whose shaped output is known.

Truth (DESIGN.md physics): the shaped height for a test pulse A is S·tanh(g·shaper.gain·A/S); through
a 1 pF test capacitor Q = C·V (1 fC per mV).  References: the charge gain and INL are those of the
least-squares line through the true heights against Q (numpy.polyfit on the same points; INL as
IEEE 1241's independently based line, REFERENCES.md); the shape fit reconstructs the CR-RC⁴ peak
without bias (REFERENCES.md "Shaping amplifiers").  Tolerances (ours): gain 1 %, INL 0.1 point
(16 averages, 0.3 mV noise), reconstruction bias within ±0.2 %, RMS below 0.5 %.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import yaml

from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
AMPLITUDES = np.array([50.0, 100.0, 200.0, 300.0, 400.0])  # mV, the procedure's charges at 1 pF


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    folder = tmp_path_factory.mktemp("shaper")
    board = dataclasses.replace(load_board_type("PA8"), serial="NR-PA8-0001", channels=1)
    procedure = load_procedure(PROCEDURES / "shaper-adc.yaml")
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{folder / 'r.db'}") as store:
        with compose.bench_for(None, str(EXAMPLE)) as spec:
            result = compose.execute(build_plan(procedure, board), spec, store, request)
        return {m.quantity: m for m in store.measurements(run_id=result.run_id)}


def test_charge_gain_and_inl_of_the_true_heights(measured):
    ch = yaml.safe_load(EXAMPLE.read_text())["channels"][0]
    s = ch["saturation_mV"]
    heights = s * np.tanh(ch["gain_x1"] * AMPLITUDES / s)  # shaper.gain 1 (example board)
    q = 1.0 * AMPLITUDES  # fC
    slope, intercept = np.polyfit(q, heights, 1)
    inl = 100 * np.max(np.abs(heights - (slope * q + intercept))) / (slope * (q.max() - q.min()))
    assert measured["charge_gain_mV_per_fC"].value == pytest.approx(slope, rel=0.01)
    assert measured["charge_inl_pct"].value == pytest.approx(inl, abs=0.1)
    assert measured["charge_gain_mV_per_fC"].verdict == "pass"


def test_slow_adc_reconstruction_is_unbiased(measured):
    assert abs(measured["reconstruction_bias_pct"].value) < 0.2
    assert measured["reconstruction_rms_pct"].value < 0.5
    assert measured["reconstruction_bias_pct"].verdict == "pass"
