"""procedures/discriminator-timing.yaml against a simulated IDC4 module whose fast pulse is known.

Truth (drivers/sim/response.py, physics.py): the x1 output of amplitude A is A·p(t − delay), p the
unit fast pulse of the board's rise/decay, with band-limited noise of RMS noise_in_mV·gain_x1.
References: the leading-edge time solves A·p(t) = threshold (geometry); the constant-fraction time
does not move with amplitude for one pulse shape (Knoll ch. 17, from memory); the jitter follows
σ_t ≈ σ_noise/(dV/dt) at the crossing (REFERENCES.md "timing jitter", standard).  Tolerances (ours):
walk within 0.1 ns (5 GS/s, interpolated), jitter within 35 % (40 shots: ±11 % statistics, and the
noise band limit is close to the rise time).  The discriminator's own logic output (``disc``) is
checked the same way: it fires where its input crosses threshold − offset (leading edge), or at the
constant-fraction point (example-idc4-cfd.yaml), its time spread coming from the input's noise only.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import yaml
from scipy.optimize import brentq

from drivers.sim.physics import fast_pulse, fast_time_constants
from sequencer import compose
from sequencer.procedure import build_plan, load_board_type, load_procedure
from sequencer.store import Store
from tests.integration.qualification_sim import PROCEDURES, ROOT

EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-idc4.yaml"
CFD_EXAMPLE = ROOT / "drivers" / "sim" / "boards" / "example-idc4-cfd.yaml"
THRESHOLD, AMPS, JITTER_AMP = 10.0, (20.0, 320.0), 30.0


def _measure(tmp_path_factory, example):
    folder = tmp_path_factory.mktemp("timing")
    board = dataclasses.replace(load_board_type("IDC4"), serial="NR-IDC4-0001", channels=1)
    procedure = load_procedure(PROCEDURES / "discriminator-timing.yaml")
    request = compose.RunRequest(
        operator="test", unattended=True, progress=False, handle_signals=False
    )
    with Store.open(f"sqlite:///{folder / 'r.db'}") as store:
        with compose.bench_for(None, str(example)) as spec:
            result = compose.execute(build_plan(procedure, board), spec, store, request)
        return {m.quantity: m for m in store.measurements(run_id=result.run_id)}


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    return _measure(tmp_path_factory, EXAMPLE)


@pytest.fixture(scope="module")
def measured_cfd(tmp_path_factory):
    return _measure(tmp_path_factory, CFD_EXAMPLE)


def truth():
    data = yaml.safe_load(EXAMPLE.read_text())
    tau_r, tau_d = fast_time_constants(data["pulse"]["rise_ns"], data["pulse"]["decay_ns"])
    ch = data["channels"][0]
    t_peak = brentq(
        lambda t: np.gradient(fast_pulse(np.array([t - 1e-4, t, t + 1e-4]), tau_r, tau_d))[1],
        0.01,
        20,
    )

    def crossing(amplitude: float, level: float = THRESHOLD) -> float:
        height = 1500 * np.tanh(ch["gain_x1"] * amplitude / 1500)  # DESIGN.md S·tanh(g·A/S)
        return brentq(
            lambda t: height * fast_pulse(np.array([t]), tau_r, tau_d)[0] - level, 1e-6, t_peak
        )

    return tau_r, tau_d, ch, crossing


def test_leading_edge_walk_and_constant_fraction(measured):
    _, _, _, crossing = truth()
    walk = crossing(AMPS[0]) - crossing(AMPS[1])
    assert measured["time_walk_ns"].value == pytest.approx(walk, abs=0.1)
    assert measured["cf_walk_ns"].value < 0.1 < walk
    assert measured["time_walk_ns"].verdict == measured["cf_walk_ns"].verdict == "pass"


def _expected_jitter(level: float) -> float:
    """σ_noise/(dV/dt) at the crossing of ``level`` by the JITTER_AMP pulse (REFERENCES.md)."""
    tau_r, tau_d, ch, crossing = truth()
    t = crossing(JITTER_AMP, level)
    height = 1500 * np.tanh(ch["gain_x1"] * JITTER_AMP / 1500)
    h = 1e-4
    pulse = fast_pulse(np.array([t - h, t + h]), tau_r, tau_d)
    return ch["noise_in_mV"] * ch["gain_x1"] / (height * (pulse[1] - pulse[0]) / (2 * h))


def test_the_discriminator_output_walks_as_its_input_crosses_the_threshold(measured):
    # the simulated discriminator fires where the x1 pulse crosses threshold - offset (DESIGN.md)
    _, _, ch, crossing = truth()
    level = THRESHOLD - ch["discriminator_offset_mV"]
    walk = crossing(AMPS[0], level) - crossing(AMPS[1], level)
    assert measured["disc_walk_ns"].value == pytest.approx(walk, abs=0.1)
    assert measured["disc_walk_ns"].verdict == "pass"


def test_a_constant_fraction_output_hardly_walks(measured, measured_cfd):
    # constant fraction: the zero crossing of y(t - d) - f·y(t) does not move with the amplitude of
    # one pulse shape (Knoll ch. 17, from memory); only noise is left
    assert measured_cfd["disc_walk_ns"].value < 0.1
    assert measured_cfd["disc_walk_ns"].value < measured["disc_walk_ns"].value / 10


def test_the_output_jitter_follows_noise_over_slope(measured):
    _, _, ch, _ = truth()
    expected = _expected_jitter(THRESHOLD - ch["discriminator_offset_mV"])
    # 40 single shots: ±11 % statistics; the noise band limit is close to the rise time (35 %)
    assert measured["disc_jitter_ns"].value == pytest.approx(expected, rel=0.35)
    assert measured["disc_jitter_ns"].verdict == "pass"


def test_jitter_follows_noise_over_slope(measured):
    tau_r, tau_d, ch, crossing = truth()
    t = crossing(JITTER_AMP)
    height = 1500 * np.tanh(ch["gain_x1"] * JITTER_AMP / 1500)
    h = 1e-4
    slope = (
        height
        * (
            fast_pulse(np.array([t + h]), tau_r, tau_d)
            - fast_pulse(np.array([t - h]), tau_r, tau_d)
        )[0]
        / (2 * h)
    )
    expected = ch["noise_in_mV"] * ch["gain_x1"] / slope
    assert measured["timing_jitter_ns"].value == pytest.approx(expected, rel=0.35)
    assert measured["timing_jitter_ns"].verdict == "pass"
