"""Sine fits of a digitised record (IEEE Std 1057 / IEEE Std 1241), SINAD and ENOB.

Model (IEEE 1057, clause numbers from memory): y[n] = A₀·cos(ωtₙ) + B₀·sin(ωtₙ) + C₀, tₙ = n / fs.

* **three-parameter fit** -- ω known: linear least squares for A₀, B₀, C₀;
* **four-parameter fit** -- ω iterated: each step linearises in Δω (a fourth column
  t·(−A₀ sin ωt + B₀ cos ωt)) and solves for A₀, B₀, C₀, Δω, starting from a three-parameter fit at
  the given frequency or at the interpolated peak of the record's spectrum.

The linear solves use the normal equations of column-scaled design matrices with time centred on
the record (well conditioned; a condition number above 1e12 is refused), while the residuals are
computed directly from the samples, so the noise figure is not limited by the solve.

SINAD = 20·log₁₀(A/√2 / rms residual) dB and ENOB = (SINAD − 10·log₁₀1.5)/20·log₁₀2 =
(SINAD − 1.7609 dB)/6.0206 dB (IEEE 1241; the 1.76/6.02 of the trade, exact constants here).
Amplitudes are in the record's unit (codes or mV); frequencies in Hz.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from ._checks import positive

#: The fewest samples a fit accepts (several per cycle of a few cycles).
MIN_SAMPLES = 16
DEFAULT_MAX_ITERATIONS = 30
#: Four-parameter convergence: relative change of ω below this ends the iteration (1 ppb).
DEFAULT_TOLERANCE = 1e-9
SINAD_QUANTISATION_DB = 10.0 * math.log10(1.5)  # 1.7609 dB
DB_PER_BIT = 20.0 * math.log10(2.0)  # 6.0206 dB


@dataclass(frozen=True, kw_only=True)
class SineFit:
    """A fitted sine: amplitude, phase (of A·cos(ωt + φ)), offset, frequency and the residuals' RMS."""

    amplitude: float
    phase_rad: float
    offset: float
    frequency_hz: float
    residual_rms: float
    iterations: int
    converged: bool

    @property
    def sinad_db(self) -> float:
        return sinad_db(self.amplitude, self.residual_rms)

    @property
    def enob(self) -> float:
        return enob(self.sinad_db)


def sinad_db(amplitude: float, residual_rms: float) -> float:
    """SINAD = 20·log₁₀((A/√2) / rms(noise and distortion)) in dB; ``inf`` for a perfect fit."""
    a = positive(amplitude, "amplitude")
    r = float(residual_rms)
    if not math.isfinite(r) or r < 0:
        raise ValueError(f"residual_rms must be a finite number >= 0, got {residual_rms!r}")
    return math.inf if r == 0 else 20.0 * math.log10(a / math.sqrt(2.0) / r)


def enob(sinad: float) -> float:
    """Effective number of bits (SINAD − 1.7609 dB)/6.0206 dB (IEEE 1241)."""
    return (float(sinad) - SINAD_QUANTISATION_DB) / DB_PER_BIT


def _record(samples: ArrayLike) -> np.ndarray:
    y = np.asarray(samples)
    if y.ndim != 1:
        raise ValueError(f"samples must be one 1-D record, got shape {y.shape}")
    if y.size < MIN_SAMPLES:
        raise ValueError(f"samples needs at least {MIN_SAMPLES} values, got {y.size}")
    if not np.issubdtype(y.dtype, np.floating):
        y = y.astype(np.float64)
    if not np.isfinite(y).all():
        raise ValueError("samples has non-finite values (NaN or inf): refusing to fit")
    return y


def _grid(n: int, fs: float) -> tuple[float, float]:
    """(first sample time, sample interval) in s, time centred on the record (well conditioned)."""
    return -0.5 * (n - 1) / fs, 1.0 / fs


def _cos_sin(w: float, t_first: float, dt: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """cos(ωtₖ), sin(ωtₖ) for tₖ = t_first + k·dt by angle addition over blocks: √n transcendental
    calls instead of n (numpy's cos of a 10⁶ array costs ten times the products), same rounding."""
    m = max(1, math.isqrt(n))
    rows = -(-n // m)
    a = w * (t_first + dt * m * np.arange(rows))
    b = w * dt * np.arange(m)
    ca, sa, cb, sb = np.cos(a)[:, None], np.sin(a)[:, None], np.cos(b), np.sin(b)
    c = (ca * cb - sa * sb).reshape(-1)[:n]
    s = (sa * cb + ca * sb).reshape(-1)[:n]
    return c, s


def _solve(rows: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least squares by the normal equations of the row-scaled design (k × k, k <= 4)."""
    gram = rows @ rows.T
    rhs = rows @ y
    scale = np.sqrt(np.diag(gram))
    if np.any(scale == 0):
        raise ValueError("the design matrix has an empty column: no sine at this frequency")
    g = gram / np.outer(scale, scale)
    if np.linalg.cond(g) > 1e12:
        raise ValueError(
            "the sine fit is singular: frequency at 0, the Nyquist rate or too few cycles"
        )
    return np.linalg.solve(g, rhs / scale) / scale


def _design(c: np.ndarray, s: np.ndarray, k: int) -> np.ndarray:
    rows = np.empty((k, c.size))
    rows[0], rows[1], rows[2] = c, s, 1.0
    return rows


def _result(
    y: np.ndarray, rows: np.ndarray, t_first: float, w: float, p: np.ndarray, it: int, ok: bool
) -> SineFit:
    a, b, offset = (float(v) for v in p[:3])
    resid = y - offset
    resid -= a * rows[0]
    resid -= b * rows[1]
    amplitude = math.hypot(a, b)
    # a·cos ωτ + b·sin ωτ = A·cos(ωτ + φc), φc = atan2(−b, a); τ = t' + t_first with t' from sample 0
    phase = math.atan2(-b, a) + w * t_first
    return SineFit(
        amplitude=amplitude,
        phase_rad=float(math.remainder(phase, 2 * math.pi)),
        offset=offset,
        frequency_hz=w / (2 * math.pi),
        residual_rms=float(math.sqrt((resid @ resid) / resid.size)),
        iterations=it,
        converged=ok,
    )


def fit_sine_3(samples: ArrayLike, frequency_hz: float, sample_rate_hz: float) -> SineFit:
    """Three-parameter sine fit at a known frequency (IEEE 1057, linear least squares)."""
    y = _record(samples)
    fs = positive(sample_rate_hz, "sample_rate_hz")
    w = 2 * math.pi * _frequency(frequency_hz, fs)
    t_first, dt = _grid(y.size, fs)
    rows = _design(*_cos_sin(w, t_first, dt, y.size), 3)
    return _result(y, rows, t_first, w, _solve(rows, y), 0, True)


def fit_sine_4(
    samples: ArrayLike,
    sample_rate_hz: float,
    frequency_hz: float | None = None,
    *,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    tolerance: float = DEFAULT_TOLERANCE,
) -> SineFit:
    """Four-parameter sine fit (IEEE 1057): frequency iterated from ``frequency_hz`` or, if None,
    from the interpolated spectral peak.

    Stops when the frequency step falls below ``tolerance`` (relative) or stops shrinking (the
    rounding floor of the sums is reached); ``converged`` is False when ``max_iterations`` ran out.
    """
    y = _record(samples)
    fs = positive(sample_rate_hz, "sample_rate_hz")
    f = estimate_frequency(y, fs) if frequency_hz is None else _frequency(frequency_hz, fs)
    w = 2 * math.pi * f
    t_first, dt = _grid(y.size, fs)
    t = t_first + dt * np.arange(y.size)
    rows = _design(*_cos_sin(w, t_first, dt, y.size), 4)
    p = _solve(rows[:3], y)
    previous = math.inf
    for it in range(1, max_iterations + 1):
        np.multiply(rows[1], p[0], out=rows[3])  # ∂/∂ω of a·cos ωt + b·sin ωt = t(b·cos − a·sin)
        rows[3] -= p[1] * rows[0]
        rows[3] *= -t
        q = _solve(rows, y)
        step = float(q[3])
        w += step
        if not 0 < w < math.pi * fs:
            raise ValueError("the four-parameter fit left (0, fs/2): give a frequency estimate")
        rows[0], rows[1] = _cos_sin(w, t_first, dt, y.size)
        p = q
        if abs(step) <= tolerance * w or (abs(step) >= 0.5 * previous and abs(step) < 1e-6 * w):
            return _result(y, rows, t_first, w, _solve(rows[:3], y), it, True)
        previous = abs(step)
    return _result(y, rows, t_first, w, _solve(rows[:3], y), max_iterations, False)


def estimate_frequency(samples: ArrayLike, sample_rate_hz: float) -> float:
    """The record's dominant frequency (Hz): the largest bin of a Hann-windowed spectrum, refined by
    a parabola through log magnitudes of the three top bins (Gaussian interpolation)."""
    y = _record(samples)
    fs = positive(sample_rate_hz, "sample_rate_hz")
    spectrum = np.abs(np.fft.rfft((y - y.mean()) * np.hanning(y.size)))
    k = int(np.argmax(spectrum[1:-1])) + 1
    lo, mid, hi = np.log(spectrum[k - 1 : k + 2] + 1e-300)
    denom = lo - 2 * mid + hi
    shift = 0.5 * (lo - hi) / denom if denom else 0.0
    return float((k + shift) * fs / y.size)


def _frequency(value: float, fs: float) -> float:
    f = positive(value, "frequency_hz")
    if f >= fs / 2:
        raise ValueError(f"frequency_hz={value!r} is at or above the Nyquist rate {fs / 2:g} Hz")
    return f
