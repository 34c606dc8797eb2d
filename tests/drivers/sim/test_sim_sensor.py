"""The simulated SiPM bench: its physics measured through its SCPI commands, against the truth of the
sensor file, with the analysis functions (tolerances of issue 17: V_bd 0.1 V, gain 2 %, DCR 10 %,
crosstalk 2 percentage points)."""

from __future__ import annotations

import copy
from collections.abc import Iterator
from typing import Any

import numpy as np
import pytest

from drivers.errors import ConfigError
from drivers.sim import start_sim_bench
from drivers.sim.sensor_bench import SensorBench
from drivers.sim.sensor_loader import sensor_from_mapping
from sequencer.analysis import (
    ELEMENTARY_CHARGE_C,
    breakdown_at_reference,
    breakdown_voltage,
    crosstalk_probability,
    dark_count_staircase,
    fit_finger_histogram,
)
from tests.drivers.sim.simkit import FakeClock

SENSOR: dict[str, Any] = {
    "serial": "LX-S3-9001",
    "seed": 5,
    "temperature_C": 27.0,
    "temperature_noise_C": 0.0,
    "readout": {"mV_per_fC": 0.05, "noise_mV": 1.0, "polarity": "positive"},
    "led": {"pe_per_V": 1.5, "threshold_V": 0.5},
    "sensors": [
        {
            "breakdown_V": 51.2,
            "reference_C": 25.0,
            "breakdown_coeff_mV_per_K": 54.0,
            "cell_capacitance_fF": 100.0,
            "dark_rate_hz_per_V": 50000.0,
            "crosstalk_lambda_per_V": 0.035,
            "cell_gain_spread": 0.05,
        },
    ],
}
V_BD_AT_27C = 51.2 + 0.054 * 2.0


def make_sensor(**top: Any) -> Any:
    data = copy.deepcopy(SENSOR)
    data.update(top)
    return sensor_from_mapping(data, source="<test sensor>")


class Rig:
    """Talks to the instruments of a sensor bench with SCPI messages, on a fake clock."""

    def __init__(self, bench: SensorBench, clock: FakeClock) -> None:
        self.bench = bench
        self.clock = clock

    def send(self, role: str, message: str) -> str:
        reply = self.bench.instruments[role].process(message)
        errors = self.bench.instruments[role].next_error()
        assert errors.startswith("0,"), f"{role} {message!r}: {errors}"
        return reply.decode().strip() if reply else ""

    def bias_to(self, volts: float) -> None:
        self.send("bias", f"SOUR:VOLT:SLEW 10;:SOUR:VOLT {volts};:OUTP ON")
        self.clock.advance(60.0)

    def histogram(self, lower: float, upper: float, bins: int, events: int) -> tuple:
        self.send("mca", f"HIST:LOW {lower};UPP {upper};BINS {bins};EVEN {events}")
        self.send("mca", "INIT")
        counts = np.array([int(x) for x in self.send("mca", "FETC:HIST?").split(",")])
        return np.linspace(lower * 1e3, upper * 1e3, bins + 1), counts

    def count(self, threshold_mV: float, gate_s: float) -> int:
        self.send("threshold", f"SOUR1:VOLT {threshold_mV * 1e-3}")
        self.send("counter", f"GATE:TIME {gate_s};:INIT")
        return int(self.send("counter", "FETC?"))


@pytest.fixture
def rig_of() -> Iterator[Any]:
    started: list[SensorBench] = []

    def start(spec: Any) -> Rig:
        clock = FakeClock()
        bench = start_sim_bench(spec, clock=clock)
        assert isinstance(bench, SensorBench)
        started.append(bench)
        return Rig(bench, clock)

    yield start
    for bench in started:
        bench.stop()


def test_gain_per_photoelectron_matches_c_delta_v_over_e(rig_of: Any) -> None:
    rig = rig_of(make_sensor())
    rig.send("pulser", "SOUR:VOLT 1.3;:SOUR:FREQ 10000;:OUTP ON")  # μ = 1.5 · (1.3 - 0.5) = 1.2
    rig.bias_to(V_BD_AT_27C + 3.0)
    edges, counts = rig.histogram(-0.01, 0.12, 260, 20000)
    fit = fit_finger_histogram(edges, counts)
    # G = C·ΔV/e, 100 fF at 3 V → 1.8724527e6 (REFERENCES.md); readout 0.05 mV/fC → 15 mV per p.e.
    gain_e = fit.gain / 0.05 * 1e-15 / ELEMENTARY_CHARGE_C
    assert gain_e == pytest.approx(1.8724527e6, rel=0.02)
    assert abs(fit.mu - 1.2) < 4 * fit.mu_err  # Poisson zero peak, insensitive to crosstalk


def test_breakdown_voltage_from_the_gain_scan(rig_of: Any) -> None:
    rig = rig_of(make_sensor())
    rig.send("pulser", "SOUR:VOLT 1.3;:SOUR:FREQ 10000;:OUTP ON")
    volts = np.array([53.0, 53.75, 54.5, 55.25, 56.0])
    gains, errs = [], []
    for v in volts:
        rig.bias_to(float(v))
        edges, counts = rig.histogram(-0.01, 0.2, 420, 8000)
        fit = fit_finger_histogram(edges, counts)
        gains.append(fit.gain)
        errs.append(fit.gain_err)
    bd = breakdown_voltage(volts, gains, errs)
    temperature = float(rig.send("temperature", "MEAS:TEMP?"))
    at_25 = breakdown_at_reference(
        bd.v_bd, temperature, reference_C=25.0, coefficient_mV_per_K=54.0
    )
    assert abs(bd.v_bd - V_BD_AT_27C) < 0.1
    assert abs(at_25 - 51.2) < 0.1
    assert bd.slope == pytest.approx(100.0 * 0.05, rel=0.02)  # C·mV_per_fC = 5 mV per p.e. per V


@pytest.mark.parametrize("polarity", ["positive", "negative"])
def test_dark_count_staircase_rate_and_crosstalk(rig_of: Any, polarity: str) -> None:
    readout = {"mV_per_fC": 0.05, "noise_mV": 1.0, "polarity": polarity, "baseline_mV": -2.0}
    rig = rig_of(make_sensor(readout=readout))
    rig.bias_to(V_BD_AT_27C + 3.0)
    sign = 1.0 if polarity == "positive" else -1.0
    levels = np.arange(0.3, 3.01, 0.2)
    thresholds = -2.0 + sign * 15.0 * levels
    counts = [rig.count(float(t), 1.0) for t in thresholds]
    st = dark_count_staircase(thresholds, counts, 1.0, gain_mV=sign * 15.0, baseline_mV=-2.0)
    # truth: DCR = 50 kHz/V · 3 V; P_ct = 1 - exp(-λ), λ = 0.035/V · 3 V (Vinogradov arXiv:1109.2014)
    assert st.dcr_half == pytest.approx(150e3, rel=0.10)
    assert abs(st.crosstalk - crosstalk_probability(0.105)) < 0.02


def test_below_breakdown_no_gain_and_no_dark_counts(rig_of: Any) -> None:
    rig = rig_of(make_sensor())
    rig.bias_to(50.0)
    assert rig.count(7.5, 1.0) == 0


def test_no_light_pulse_no_trigger(rig_of: Any) -> None:
    rig = rig_of(make_sensor())
    rig.bench.instruments["mca"].process("INIT")
    assert rig.bench.instruments["mca"].next_error().startswith("-221")


def test_simulated_clock_is_stated_in_the_identity(rig_of: Any) -> None:
    rig = rig_of(make_sensor())
    assert "FAST" in rig.send("mca", "*IDN?")
    assert "FAST" not in rig_of(make_sensor(time_scale=1.0)).send("mca", "*IDN?")


def test_sensor_file_problems_are_located() -> None:
    data = copy.deepcopy(SENSOR)
    data["sensors"][0]["breakdown_volts"] = 50
    with pytest.raises(ConfigError, match="did you mean 'breakdown_V'"):
        sensor_from_mapping(data)


def test_role_drivers_over_real_sockets(rig_of: Any) -> None:
    # the generic dialect's mca and temperature operations, through pyvisa-py to the TCP servers
    from drivers.bench import bench_from_mapping, open_bench

    rig = rig_of(make_sensor(temperature_noise_C=0.05))
    rig.bias_to(V_BD_AT_27C + 3.0)
    spec = bench_from_mapping(rig.bench.bench_mapping(), source="<sim>")
    with open_bench(spec, roles=["pulser", "mca", "temperature"]) as bench:
        bench.pulser.set_amplitude(1300.0)
        bench.pulser.set_rate(10_000.0)
        bench.pulser.set_output(True)
        mca = bench.role("mca")
        mca.set_range(lower_mV=-10.0, upper_mV=60.0, bins=140)
        mca.set_trigger("EXTernal")
        hist = mca.acquire(1, 5000)
        assert hist.events == 5000 and hist.counts.size == 140
        assert hist.edges_mV[0] == pytest.approx(-10.0) and hist.edges_mV[-1] == pytest.approx(60.0)
        assert hist.above > 0  # 4 p.e. and more lie above 60 mV
        assert abs(bench.role("temperature").read_C() - 27.0) < 0.5
