"""Noise figures: equivalent noise charge and trace averaging."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import as_traces

ELEMENTARY_CHARGE_C = 1.602176634e-19
"""The elementary charge, exact in the SI since 2019."""


def enc_electrons(noise_mV: ArrayLike, gain_mV_per_fC: ArrayLike) -> float | np.ndarray:
    """Equivalent noise charge in electrons: ENC = σ_out / (dV/dQ) / q_e.

    ``noise_mV`` is the RMS output noise (mV, >= 0), ``gain_mV_per_fC`` the charge gain (mV/fC,
    > 0); 2 mV at 10 mV/fC is 0.2 fC = 1248.3 e⁻.  Scalars give a float, arrays broadcast.
    """
    noise = np.asarray(noise_mV, dtype=np.float64)
    gain = np.asarray(gain_mV_per_fC, dtype=np.float64)
    if not np.all(np.isfinite(noise)) or np.any(noise < 0.0):
        raise ValueError("noise_mV must be finite and >= 0")
    if not np.all(np.isfinite(gain)) or np.any(gain <= 0.0):
        raise ValueError("gain_mV_per_fC must be finite and > 0")
    enc = noise / gain * 1e-15 / ELEMENTARY_CHARGE_C
    return float(enc) if enc.ndim == 0 else enc


@dataclass(frozen=True, eq=False)
class TraceAverage:
    """Sample-by-sample mean of ``count`` traces (mV) and its standard error (mV, ddof = 1)."""

    mean: np.ndarray
    std_err: np.ndarray
    count: int


def average_traces(traces: ArrayLike) -> TraceAverage:
    """Average repeated acquisitions (one a row, at least 2) sample by sample.

    Uncorrelated (white) noise on the mean falls as 1/√N; ``std_err`` is the sample standard
    deviation over the rows divided by √N, per sample.
    """
    arr, one = as_traces(traces)
    if one or arr.shape[0] < 2:
        raise ValueError("average_traces needs a 2-D array of at least 2 traces (one a row)")
    mean = arr.mean(axis=0, dtype=np.float64)
    if not np.all(np.isfinite(mean)):
        raise ValueError("average_traces: NaN or inf samples in the traces")
    std_err = arr.std(axis=0, ddof=1, dtype=np.float64) / np.sqrt(arr.shape[0])
    mean.setflags(write=False)
    std_err.setflags(write=False)
    return TraceAverage(mean=mean, std_err=std_err, count=int(arr.shape[0]))
