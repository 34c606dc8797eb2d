"""The simulated discriminator's logic output: when it fires, from the noisy pulse it sees.

References: the leading-edge instant solves A·p(t) = u (geometry of the pulse the simulator plays,
DESIGN.md); its spread σ_t ≈ σ_noise/(dV/dt) at the crossing (REFERENCES.md "timing jitter",
standard); a constant-fraction instant does not move with the amplitude of one pulse shape (Knoll,
Radiation Detection and Measurement, ch. 17, from memory).  Tolerances (ours): 400 shots give ±3.5 %
on an RMS; 15 % covers that and the noise's band limit near the rise time.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.optimize import brentq

from drivers.sim import load_board
from drivers.sim.disc_output import fire_time_ns, logic_mV
from drivers.sim.physics import fast_pulse
from tests.integration.qualification_sim import ROOT

BOARD = load_board(ROOT / "drivers" / "sim" / "boards" / "example-idc4.yaml")
LEVEL = 11.0  # channel 1: offset 1.0 mV, so the effective threshold u is 10 mV


def _times(board, amplitude, n=400, level=LEVEL, seed=3):
    rng = np.random.default_rng(seed)
    return np.array([fire_time_ns(board, 1, amplitude, level, rng) for _ in range(n)], dtype=float)


def _crossing_and_slope(amplitude: float, u: float) -> tuple[float, float]:
    p = BOARD.pulse
    height = 1500 * np.tanh(amplitude / 1500)  # gain_x1 1.0, S 1500 mV (DESIGN.md S·tanh(g·A/S))
    t = brentq(lambda x: height * fast_pulse(np.array([x]), p.tau_rise_ns, p.tau_decay_ns)[0] - u,
               1e-6, 3.0)  # fmt: skip
    h = 1e-4
    y = height * fast_pulse(np.array([t - h, t + h]), p.tau_rise_ns, p.tau_decay_ns)
    return t, (y[1] - y[0]) / (2 * h)


@pytest.mark.parametrize("amplitude", [30.0, 80.0])
def test_leading_edge_time_and_jitter_from_the_noise(amplitude):
    t = _times(BOARD, amplitude)
    crossing, slope = _crossing_and_slope(amplitude, LEVEL - 1.0)
    sigma = BOARD.channels[0].noise_in_mV * BOARD.channels[0].gain_x1
    assert t.mean() == pytest.approx(crossing, abs=0.01)
    assert t.std(ddof=1) == pytest.approx(sigma / slope, rel=0.15)


def test_constant_fraction_time_does_not_walk():
    cfd = dataclasses.replace(
        BOARD, discriminator=dataclasses.replace(BOARD.discriminator, mode="constant_fraction")
    )
    means = [_times(cfd, a, n=100).mean() for a in (20.0, 80.0, 320.0)]
    le = [_times(BOARD, a, n=100).mean() for a in (20.0, 320.0)]
    assert max(means) - min(means) < 0.02 < le[0] - le[1]


def test_no_crossing_no_pulse_and_the_logic_pulse_shape():
    assert np.isnan(_times(BOARD, 5.0, n=5)).all()  # 5 mV never reaches u = 10 mV (σ 0.3 mV)
    spec = BOARD.discriminator
    t = np.array([0.0, spec.propagation_ns + 2.0, spec.propagation_ns + spec.width_ns + 5.0])
    assert logic_mV(BOARD, 0.0, t).tolist() == [0.0, spec.logic_mV, 0.0]
    assert not logic_mV(BOARD, None, t).any()
