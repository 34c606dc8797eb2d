"""The physics of a simulated SiPM on its readout channel (pure functions; no SCPI).

- Breakdown voltage at temperature T: V_bd(T) = V_bd + k·(T - T_ref).
- Gain per fired cell G = C_cell·(V - V_bd)/e (common practice; REFERENCES.md: 100 fF at 3 V →
  1.8724527e6); the readout turns the charge G·e into a height A₁ = G·e/fC · mV_per_fC.
- Dark counts: Poisson at ``dark_rate_hz_per_V``·(V - V_bd); below breakdown nothing.
- Optical crosstalk, branching Poisson (Vinogradov arXiv:1109.2014): each fired cell fires
  Poisson(λ) neighbours, λ = ``crosstalk_lambda_per_V``·(V - V_bd).  One primary gives k cells with
  the Borel law P(k) = e^(-λk)(λk)^(k-1)/k!, so P(k ≥ 2) = 1 - e^(-λ).
- Heights: k cells give baseline + sign·(k·A₁ + N(0, √(σ₀² + k·σ₁²))), σ₁ = spread·A₁.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

from drivers.sim.sensor import LedSpec, ReadoutSpec, SipmSpec

ELEMENTARY_CHARGE_C = 1.602176634e-19
MAX_CELLS = 60
"""Borel terms summed for rates (λ < 1: the tail beyond is far below a count)."""


def breakdown_at(sipm: SipmSpec, temperature_C: float) -> float:
    """V_bd at ``temperature_C``."""
    return sipm.breakdown_V + sipm.breakdown_coeff_mV_per_K * 1e-3 * (
        temperature_C - sipm.reference_C
    )


def overvoltage(sipm: SipmSpec, bias_V: float, temperature_C: float) -> float:
    """V - V_bd(T), never below 0 (below breakdown the sensor is not in Geiger mode)."""
    return max(0.0, bias_V - breakdown_at(sipm, temperature_C))


def gain_electrons(sipm: SipmSpec, over_V: float) -> float:
    """G = C_cell·ΔV/e."""
    return sipm.cell_capacitance_fF * 1e-15 * over_V / ELEMENTARY_CHARGE_C


def height_per_cell_mV(sipm: SipmSpec, readout: ReadoutSpec, over_V: float) -> float:
    """A₁: readout height of one fired cell (mV, unsigned)."""
    charge_fC = gain_electrons(sipm, over_V) * ELEMENTARY_CHARGE_C / 1e-15
    return charge_fC * readout.mV_per_fC


def dark_rate_hz(sipm: SipmSpec, over_V: float) -> float:
    return sipm.dark_rate_hz_per_V * over_V


def branching_lambda(sipm: SipmSpec, over_V: float) -> float:
    lam = sipm.crosstalk_lambda_per_V * over_V
    if lam >= 1.0:
        raise ValueError(f"crosstalk λ = {lam:.3g} >= 1: the avalanche chain never ends")
    return lam


def led_mean_pe(led: LedSpec, drive_V: float, light_scale: float = 1.0) -> float:
    """Mean primary photoelectrons per LED pulse for a pulser drive of ``drive_V``."""
    return max(0.0, drive_V - led.threshold_V) * led.pe_per_V * light_scale


def borel_pmf(k: np.ndarray, lam: float) -> np.ndarray:
    """P(k cells | one primary), k >= 1."""
    kv = np.asarray(k, dtype=np.float64)
    if lam <= 0.0:
        return (kv == 1).astype(np.float64)
    log_p = -lam * kv + (kv - 1.0) * np.log(lam * kv) - special.gammaln(kv + 1.0)
    return np.exp(log_p)


def add_crosstalk(rng: np.random.Generator, primaries: np.ndarray, lam: float) -> np.ndarray:
    """Total fired cells per event: every fired cell fires Poisson(λ) more, down the generations."""
    total = primaries.astype(np.int64)
    todo = total.copy()
    for _ in range(10 * MAX_CELLS):  # bounded: λ < 1 ends the chain long before
        if not todo.any():
            break
        todo = rng.poisson(lam * todo)
        total += todo
    return total


def heights_mV(
    rng: np.random.Generator,
    cells: np.ndarray,
    a1_mV: float,
    sipm: SipmSpec,
    readout: ReadoutSpec,
) -> np.ndarray:
    """Readout heights (signed, with baseline) of events with ``cells`` fired cells."""
    s1 = sipm.cell_gain_spread * a1_mV
    sigma = np.sqrt(readout.noise_mV**2 + cells * s1 * s1)
    pulse = cells * a1_mV + rng.normal(0.0, 1.0, cells.size) * sigma
    return readout.baseline_mV + readout.sign * pulse


def rate_above_hz(
    threshold_mV: float, *, sipm: SipmSpec, readout: ReadoutSpec, over_V: float
) -> float:
    """Expected discriminator rate at ``threshold_mV`` (signed, absolute level): dark pulses whose
    height with noise crosses it, plus Rice noise firings ν₀·exp(-u²/2σ₀²) (CR-RC², REFERENCES.md)."""
    u = readout.sign * (threshold_mV - readout.baseline_mV)
    sigma0 = readout.noise_mV
    nu0 = math.sqrt(3.0) / (2.0 * math.pi * readout.discriminator_tau_ns * 1e-9)
    noise = nu0 if u <= 0 else nu0 * math.exp(-(u * u) / (2.0 * sigma0 * sigma0))
    if over_V <= 0.0:
        return noise
    a1 = height_per_cell_mV(sipm, readout, over_V)
    k = np.arange(1, MAX_CELLS + 1, dtype=np.float64)
    width = np.sqrt(sigma0**2 + k * (sipm.cell_gain_spread * a1) ** 2)
    p_fire = special.ndtr((k * a1 - u) / width)
    lam = branching_lambda(sipm, over_V)
    return float(dark_rate_hz(sipm, over_V) * (borel_pmf(k, lam) @ p_fire) + noise)
