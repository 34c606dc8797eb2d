"""The simulated digitizer's converter with a sine input: transitions, DNL, missing codes, noise,
aperture jitter and a one-pole bandwidth (board section ``converter``, keys in
:mod:`drivers.sim.board`).

While the pulser runs in sine mode, every scope input sees the generator directly: v(t) = offset +
A·|H(f)|·sin(2πf(t + δ) + φ), |H(f)| = 1/√(1 + (f/f_c)²) (``bandwidth_mhz`` = f_c, 0: unlimited), δ
Gaussian aperture jitter per sample, φ drawn per capture (the record is not locked to the sine).
The converter's transition k (into code k of 0 .. 2^b − 1, counted from the bottom of the range) sits
at T[k] = 1 + Σ_{j<k, j>=1} W[j] LSB above the range's bottom edge + ½ LSB, W the code widths: 1 LSB
each, plus a DNL pattern of RMS ``dnl_rms_lsb`` (drawn once from the board's seed) and 0 for each of
``missing_codes``, normalised to a mean of 1 LSB.  An ideal converter (no DNL) rounds to the
nearest code, as the scope's own ADC model does, so both share one calibration: volts = code16 ·
full_scale/65536 + offset with code16 = (k − 2^(b−1)) · 2^(16−b).
"""

from __future__ import annotations

import math

import numpy as np

from drivers.sim.board import ConverterSpec


def code_widths(spec: ConverterSpec, bits: int, seed: int) -> np.ndarray:
    """Widths (LSB) of the inner codes 1 .. 2^bits − 2, mean 1 LSB."""
    n = (1 << bits) - 2
    rng = np.random.default_rng([seed, 1241])  # one pattern per board, whatever the captures
    widths = np.clip(1.0 + spec.dnl_rms_lsb * rng.standard_normal(n), 0.05, None)
    for code in spec.missing_codes:
        if 1 <= code <= n:
            widths[code - 1] = 0.0
    return widths * (n / widths.sum())


def transitions(spec: ConverterSpec, bits: int, seed: int) -> np.ndarray:
    """T[1] .. T[2^bits − 1] in LSB from the range's bottom edge (ideal: k − ½)."""
    widths = code_widths(spec, bits, seed)
    return 0.5 + np.concatenate([[0.0], np.cumsum(widths)])


def sine_volts(
    spec: ConverterSpec,
    *,
    t_s: np.ndarray,
    frequency_hz: float,
    amplitude_V: float,
    offset_V: float,
    phase_rad: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """The generator's sine as the converter samples it (bandwidth, aperture jitter)."""
    gain = 1.0
    if spec.bandwidth_mhz > 0:
        gain = 1.0 / math.sqrt(1.0 + (frequency_hz / (spec.bandwidth_mhz * 1e6)) ** 2)
    t = t_s
    if spec.aperture_jitter_ps > 0:
        t = t_s + rng.normal(0.0, spec.aperture_jitter_ps * 1e-12, t_s.shape)
    return offset_V + amplitude_V * gain * np.sin(2.0 * math.pi * frequency_hz * t + phase_rad)


def convert(
    volts: np.ndarray,
    *,
    full_scale_V: float,
    offset_V: float,
    bits: int,
    edges: np.ndarray,
    noise_lsb: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """int16 codes (in 2^(16−bits) steps) of ``volts`` through the converter with ``edges``."""
    q = full_scale_V / (1 << bits)
    x = (volts - offset_V) / q + (1 << (bits - 1))  # LSB from the bottom edge of the range
    if noise_lsb > 0:
        x = x + rng.normal(0.0, noise_lsb, x.shape)
    code = np.searchsorted(edges, x, side="right")  # 0 .. 2^bits - 1, clipped at the ends
    return ((code - (1 << (bits - 1))) * (1 << (16 - bits))).astype(np.int16)
