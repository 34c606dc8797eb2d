"""procedures/digitizer.yaml against simulated DGZ4 digitizers whose converters are known.

References: an ideal N-bit converter's ENOB within 0.1 bit of N and SINAD 6.02N + 1.76 dB
(REFERENCES.md "Digitizers", IEEE Std 1241); white noise σ (LSB) adds to the quantisation variance
1/12, so ENOB falls by ½·log2(1 + 12σ²) (IEEE 1241 noise relation, from memory); a missing code has
DNL −1 and is counted by the code-density test (IEEE 1241 histogram test, clause from memory); a
one-pole input of corner f_c has |H(f_c)| = 1/√2, −3.0103 dB (circuit theory, standard).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest
import yaml

from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-dgz4.yaml"


def digitizer_file(folder: Path, serial: str, **converter: object) -> Path:
    data = yaml.safe_load(EXAMPLE.read_text())
    data["serial"] = serial
    data["converter"] = {"dnl_rms_lsb": 0.0, "aperture_jitter_ps": 0.0, "bandwidth_mhz": 0.0,
                         **converter}  # fmt: skip
    path = folder / f"{serial}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def run_input_1(board_file: Path, db: Path) -> dict[str, object]:
    serial = yaml.safe_load(board_file.read_text())["serial"]
    procedure = load_procedure(PROCEDURES / "digitizer.yaml")
    board = dataclasses.replace(load_board_type("DGZ4"), serial=serial, channels=1)
    plan = build_plan(procedure, board)
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{db}") as store:
        with compose.bench_for(None, str(board_file)) as spec:
            result = compose.execute(plan, spec, store, request)
        return {m.quantity: m for m in store.measurements(run_id=result.run_id)}


@pytest.mark.parametrize("noise_lsb", [0.0, 0.5])
def test_enob_of_a_converter_with_known_noise(tmp_path, noise_lsb):
    values = run_input_1(
        digitizer_file(tmp_path, "NR-DGZ4-9001", noise_lsb=noise_lsb), tmp_path / "r.db"
    )
    expected = 10 - 0.5 * math.log2(1 + 12 * noise_lsb**2)
    assert values["enob_bits"].value == pytest.approx(expected, abs=0.1)
    assert values["sinad_db"].value == pytest.approx(6.0206 * expected + 1.7609, abs=0.6)
    assert values["missing_codes"].value == 0 and values["missing_codes"].verdict == "pass"
    assert values["dnl_max_lsb"].value < 0.3


def test_missing_codes_fail_the_digitizer(tmp_path):
    board = digitizer_file(tmp_path, "NR-DGZ4-9002", noise_lsb=0.2, missing_codes=[300, 611])
    values = run_input_1(board, tmp_path / "r.db")
    assert values["missing_codes"].value == 2 and values["missing_codes"].verdict == "fail"
    assert values["dnl_max_lsb"].value == pytest.approx(1.0)  # DNL −1 at a missing code
    assert values["dnl_max_lsb"].verdict == "fail"


@pytest.mark.parametrize("corner_mhz", [150.0, 250.0])
def test_bandwidth_of_a_one_pole_input(tmp_path, corner_mhz):
    board = digitizer_file(tmp_path, "NR-DGZ4-9003", noise_lsb=0.3, bandwidth_mhz=corner_mhz)
    values = run_input_1(board, tmp_path / "r.db")
    bandwidth = values["bandwidth_mhz"]
    # interpolated in (log f, dB) between scan points ~50 MHz apart: within 3 % (our tolerance)
    assert bandwidth.value == pytest.approx(corner_mhz, rel=0.03)
    assert bandwidth.verdict == ("fail" if corner_mhz < 200 else "pass")  # DGZ4 limit: >= 200 MHz


def test_an_input_wider_than_the_scan_is_not_given_a_bandwidth(tmp_path):
    # bandwidth_mhz 0: unlimited; the gain never reaches -3 dB up to 401.3 MHz
    values = run_input_1(digitizer_file(tmp_path, "NR-DGZ4-9004"), tmp_path / "r.db")
    assert not values["bandwidth_mhz"].measured  # a stored NaN reads back NaN, never a number
    assert values["bandwidth_mhz"].verdict == "fail"
