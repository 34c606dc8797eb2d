"""Reference pulse shapes for the analysis tests (formulas from shared/REFERENCES.md).

Shaping amplifiers, step input, x = (t - t0)/τ (H. Spieler, Semiconductor Detector Systems, OUP
2005, ch. 4): unipolar CR-RCⁿ v = xⁿ e⁻ˣ / n!; bipolar CR²-RCⁿ v = (xⁿ e⁻ˣ / n!)(1 - x/(n+1)).
Sample i sits at t = i·dt (the convention of sequencer.analysis).
"""

from __future__ import annotations

import math

import numpy as np


def time_axis(n_samples: int, dt_ns: float) -> np.ndarray:
    return np.arange(n_samples) * dt_ns


def cr_rc(t_ns: np.ndarray, t0_ns: float, tau_ns: float, order: int) -> np.ndarray:
    x = np.clip((t_ns - t0_ns) / tau_ns, 0.0, None)
    return x**order * np.exp(-x) / math.factorial(order)


def bipolar(t_ns: np.ndarray, t0_ns: float, tau_ns: float, order: int) -> np.ndarray:
    x = np.clip((t_ns - t0_ns) / tau_ns, 0.0, None)
    return cr_rc(t_ns, t0_ns, tau_ns, order) * (1.0 - x / (order + 1))


def single_pole_step(t_ns: np.ndarray, t0_ns: float, tau_ns: float) -> np.ndarray:
    """Step response of one RC pole: 1 - exp(-(t - t0)/τ) after t0."""
    return 1.0 - np.exp(-np.clip(t_ns - t0_ns, 0.0, None) / tau_ns)
