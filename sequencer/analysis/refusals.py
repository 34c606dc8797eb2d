"""Refusing what cannot be measured: the reasons, the per-row checks and the ``Measured`` result.

STYLE.md rule 20: a function that cannot measure returns NaN with a reason, never a plausible
number.  The pulse functions of this package return NaN for the rows they refuse; the checks here
say why, in words the verdict and the certificate print:

* ``no pulse above N σ of the baseline noise`` — the excursion in the output's direction is not
  larger than ``min_snr`` times the noise σ (a dead channel, an output not connected).  σ is the
  upper confidence bound (``SIGMA_BOUND_ALPHA``) of the baseline window's RMS for its *effective*
  number of independent samples: shaped noise is correlated over the shaper's time constant, so a
  300 ns window of a 50 ns CR-RC^4 output holds ~3 independent samples and its RMS alone is
  often far below the true σ (a dead channel then read "wrong polarity" or a pulse; see
  :func:`noise_bound_factor`);
* ``pulse of the wrong polarity`` — the largest excursion goes the other way (a negative-going
  output analysed as positive, or the reverse): never reported as a dead channel;
* ``clipped: N % of samples at the rail`` — samples sit at the digitizer's range limits, so neither
  a height nor an RMS is the signal's (needs the rails, i.e. the input's range and offset);
* ``flat-topped pulse`` — the top of the pulse is cut flat (saturated before the digitizer, or
  clipped at a rail not given here): its height and the time of its peak are not the pulse's.

Polarity is +1 for a positive-going output and -1 for a negative-going one (the board type declares
it per output).  Signed analyses work on ``polarity · (trace - baseline)`` and give heights with the
output's sign.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

DEFAULT_MIN_SNR = 5.0
"""A pulse stands at least this many σ above its baseline (σ: the noise bound below).  With σ known,
the largest of 1000 samples of Gaussian noise exceeds 5 σ with probability ~6e-4 (normal tail
2.9e-7 per sample, standard; correlated samples exceed it less often)."""

SIGMA_BOUND_ALPHA = 1e-3
"""The noise σ a pulse is judged against is the one-sided upper (1 - alpha) confidence bound of the
baseline RMS, s·sqrt(ν/χ²_ν(alpha)) (the chi-square interval of a normal variance, standard), ν
the window's effective number of samples: the bound is below the true σ with probability alpha.
Measured (tests/sequencer/analysis/test_pulse_reasons_correlated.py, 500 seeds a shaper, CR-RC^n
noise filtered by scipy): noise alone passes for a pulse or a wrong polarity in 0-1 of 500 white or
fast-shaped traces and 0.4-1 % of CR-RC^4 traces whose 75-sample window is 6 time constants (a
window that short overstates ν); the rule claims <= 2 % down to 6 time constants (the RMS alone:
~1/3 of CR-RC^4 traces)."""

ACF_MAX_LAG_FRACTION = 0.25
"""Autocorrelations of the baseline window are summed up to N/4 lags (common practice: Box &
Jenkins, *Time Series Analysis*, use at most N/4 lags of a sample autocorrelation)."""

ACF_MAX_ROWS = 64
"""The autocorrelation is averaged over at most this many rows: 64 windows pin it down (its
spread falls as 1/sqrt(rows)), and a call with 10,000 captures pays for 64, not 10,000."""

RAIL_TOLERANCE = 1e-3
"""A sample within this fraction of the full-scale range of a rail counts as at the rail (a 10-bit
step; a 12-bit converter's last codes fall inside it)."""

MAX_CLIPPED_FRACTION = 0.0
"""Any sample at a rail refuses the capture: a clipped sample has lost its value."""

FLAT_TOP_MIN_SAMPLES = 5
"""A top flat for at least this many samples, and for ``FLAT_TOP_MIN_FRACTION`` of the pulse's
width above half height, is cut off (a smooth peak quantised by an averaging scope is flat over a
few samples, a clipped one over a large part of its width)."""

FLAT_TOP_MIN_FRACTION = 0.1

WRONG_POLARITY = "pulse of the wrong polarity"
FLAT_TOP = "flat-topped pulse (its top is cut off: saturated or clipped)"
NON_FINITE = "NaN or inf samples in the trace"


def no_pulse(min_snr: float = DEFAULT_MIN_SNR) -> str:
    """The reason for a trace without a pulse above ``min_snr`` σ of its baseline noise."""
    return f"no pulse above {min_snr:g} σ of the baseline noise"


def clipped(fraction: float) -> str:
    """The reason for a capture with ``fraction`` (0..1) of its samples at a rail."""
    return f"clipped: {100.0 * fraction:.3g} % of samples at the rail"


@dataclass(frozen=True)
class Measured:
    """A figure with its one-sigma uncertainty, or NaN and the reason it could not be measured.

    ``reason`` is empty for a measured value.  ``uncertainty`` is None when unknown.
    """

    value: float
    uncertainty: float | None = None
    reason: str = ""

    @property
    def measured(self) -> bool:
        return not self.reason and bool(np.isfinite(self.value))

    @classmethod
    def refused(cls, reason: str) -> Measured:
        return cls(value=float("nan"), uncertainty=None, reason=reason)


def check_polarity(polarity: object) -> int:
    """``polarity`` as +1 or -1; ValueError otherwise."""
    if isinstance(polarity, bool) or polarity not in (1, -1):
        raise ValueError(
            f"polarity must be +1 (positive-going) or -1 (negative-going), got {polarity!r}"
        )
    return int(polarity)  # type: ignore[call-overload]


def check_rails(rails_mV: ArrayLike | None) -> tuple[float, float] | None:
    """``(low, high)`` rails of the digitizer in mV, or None."""
    if rails_mV is None:
        return None
    lo, hi = (float(v) for v in np.asarray(rails_mV, dtype=np.float64).reshape(2))
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise ValueError(f"rails_mV must be two finite numbers, low < high, got {rails_mV!r}")
    return lo, hi


def clipped_fraction(arr: np.ndarray, rails_mV: tuple[float, float]) -> np.ndarray:
    """Per row, the fraction of samples within ``RAIL_TOLERANCE`` of full scale of either rail."""
    lo, hi = rails_mV
    tol = RAIL_TOLERANCE * (hi - lo)
    at_rail = (arr <= lo + tol) | (arr >= hi - tol)
    return at_rail.mean(axis=1, dtype=np.float64)


def clipping_reasons(arr: np.ndarray, rails_mV: tuple[float, float] | None) -> list[str]:
    """Per row: the clipping reason, or "" (no rails known: nothing to check)."""
    if rails_mV is None:
        return [""] * arr.shape[0]
    frac = clipped_fraction(arr, rails_mV)
    return [clipped(f) if f > MAX_CLIPPED_FRACTION else "" for f in frac]


def effective_samples(window: np.ndarray) -> float:
    """The effective number of independent samples of the variance of one row of ``window``
    (2-D, N samples a row): Bartlett's ν = N / (1 + 2 Σ_k ρ_k²) (M. S. Bartlett, J. R. Stat. Soc.
    Suppl. 8 (1946) 27; the variance of a sample variance of correlated Gaussian noise), clipped
    to [1, N].  ρ_k, lags 1..N/4, is the sample autocorrelation averaged over the rows (the rows
    of one call are captures of one output: one noise process), at most ``ACF_MAX_ROWS`` of them
    evenly spaced, those with only finite samples; each ρ_k² less its white-noise expectation 1/(N·rows) (Bartlett's variance of
    ρ_k), so independent samples give ν ≈ N, not fewer."""
    n = window.shape[1]
    if window.shape[0] > ACF_MAX_ROWS:
        window = window[np.linspace(0, window.shape[0] - 1, ACF_MAX_ROWS).astype(int)]
    centred = window - window.mean(axis=1, keepdims=True, dtype=np.float64)
    c0 = np.einsum("ij,ij->i", centred, centred)
    finite = np.isfinite(c0)  # a row with NaN/inf is refused on its own; it says nothing here
    if not finite.all():
        centred, c0 = centred[finite], c0[finite]
    rows = centred.shape[0]
    if rows == 0:
        return float(n)
    safe = np.where(c0 > 0.0, c0, 1.0)
    # one einsum per lag (plain C loops: no BLAS call, whose threads would spin on a loaded machine)
    excess = 0.0
    for k in range(1, max(1, int(ACF_MAX_LAG_FRACTION * n)) + 1):
        rho = float(np.mean(np.einsum("ij,ij->i", centred[:, :-k], centred[:, k:]) / safe))
        excess += rho * rho - 1.0 / (n * rows)
    return n / float(np.clip(1.0 + 2.0 * excess, 1.0, float(n)))


def noise_bound_factor(nu: float, alpha: float = SIGMA_BOUND_ALPHA) -> float:
    """σ_upper / s for an RMS s of ``nu`` effective samples: sqrt(ν / χ²_ν(alpha)), the one-sided
    upper confidence bound of a normal σ (the chi-square interval, standard; ν need not be an
    integer).  ~1.2 for 200 independent samples, ~4.5 for 5 (a short window of shaped noise)."""
    # χ²_ν quantile as 2·P⁻¹(ν/2, alpha), the regularised incomplete gamma's inverse (the same
    # value as scipy.stats.chi2.ppf, without its 80 µs of argument handling per call)
    return float(np.sqrt(nu / (2.0 * special.gammaincinv(0.5 * nu, alpha))))


def pulse_reasons(
    arr: np.ndarray,
    n_baseline: int,
    *,
    polarity: int = 1,
    min_snr: float = DEFAULT_MIN_SNR,
    rails_mV: tuple[float, float] | None = None,
    flat_top: bool = True,
    peaks: tuple[np.ndarray, np.ndarray] | None = None,
    baseline: np.ndarray | None = None,
) -> list[str]:
    """Per row of ``arr`` (2-D, mV): why no pulse can be measured on it, or "" when one can.

    ``peaks``: the (index, value) of each row's extreme sample in the direction of ``polarity``,
    when the caller has them already, and ``baseline`` the mean of each row's first ``n_baseline``
    samples (each saves a pass over a large capture).

    Checks in order: non-finite samples, clipping at the rails, the size and direction of the
    largest excursion from the mean of the first ``n_baseline`` samples (against ``min_snr`` times
    the upper confidence bound of their RMS for their effective number of samples,
    :func:`effective_samples` and :func:`noise_bound_factor`: correlated noise in a short window
    is judged by the σ it may have, not the RMS it happened to show; a noise-free baseline
    accepts any excursion), then (``flat_top``) a flat top.  A
    step's plateau is flat by nature: transition durations pass ``flat_top=False``.  Vectorised:
    one pass for the maxima, one for the minima; the flat-top run is looked at only on rows whose
    extreme sample has an equal neighbour.
    """
    if not min_snr >= 0.0:
        raise ValueError(f"min_snr must be a number >= 0, got {min_snr!r}")
    clip = clipping_reasons(arr, rails_mV)
    window = arr[:, :n_baseline]
    base = window.mean(axis=1, dtype=np.float64) if baseline is None else baseline
    # RMS about the mean in one more pass: E[x²] - E[x]² (float64 keeps a 1 V baseline's 1 µV noise)
    mean_sq = np.einsum("ij,ij->i", window, window, dtype=np.float64) / n_baseline
    rms = np.sqrt(np.maximum(mean_sq - base * base, 0.0))
    sigma = rms * noise_bound_factor(effective_samples(window)) if n_baseline > 1 else rms
    if peaks is None:
        i_top = np.argmax(arr, axis=1) if polarity > 0 else np.argmin(arr, axis=1)
        extreme = np.take_along_axis(arr, i_top[:, None], axis=1)[:, 0].astype(np.float64)
    else:
        i_top, extreme = peaks
    other = (arr.min(axis=1) if polarity > 0 else arr.max(axis=1)).astype(np.float64)
    up = polarity * (extreme - base)
    down = polarity * (base - other)
    scale = np.maximum(np.abs(up), np.abs(down))
    floor = np.maximum(min_snr * sigma, 1e-9 * scale)
    with np.errstate(invalid="ignore"):
        bad = ~(np.isfinite(up) & np.isfinite(down))
        wrong = (down > floor) & (down > up)
        none = ~(up > floor) | (up <= 0.0)
    candidates = np.flatnonzero(~(bad | wrong | none)) if flat_top else np.array([], dtype=int)
    flat = np.zeros(arr.shape[0], dtype=bool)
    for i in candidates[_equal_neighbour(arr, candidates, i_top[candidates], extreme[candidates])]:
        flat[i] = _flat_top(polarity * (arr[i] - base[i]), float(up[i]))
    out = list(clip)
    for i in np.flatnonzero(bad | wrong | none | flat):
        if bad[i]:
            out[i] = NON_FINITE
        elif not clip[i]:
            out[i] = WRONG_POLARITY if wrong[i] else (no_pulse(min_snr) if none[i] else FLAT_TOP)
    return out


def _equal_neighbour(
    arr: np.ndarray, rows: np.ndarray, idx: np.ndarray, top: np.ndarray
) -> np.ndarray:
    """Of ``rows``, those whose extreme sample (at ``idx``, value ``top``) has a neighbour equal to
    it (within 1e-6): where a flat top may be.  Reads two samples a row, copies nothing."""
    if rows.size == 0:
        return np.zeros(0, dtype=bool)
    tol = 1e-6 * np.abs(top)
    last = arr.shape[1] - 1
    left = np.abs(arr[rows, np.clip(idx - 1, 0, last)] - top) <= tol
    right = np.abs(arr[rows, np.clip(idx + 1, 0, last)] - top) <= tol
    return (left & (idx > 0)) | (right & (idx < last))


def _flat_top(signed: np.ndarray, top: float) -> bool:
    """True when the samples at the top (within 1e-6 of it) run for a large part of the pulse."""
    at_top = signed >= top - 1e-6 * abs(top)
    run = _longest_run(at_top)
    width = int(np.count_nonzero(signed >= 0.5 * top))
    return run >= max(FLAT_TOP_MIN_SAMPLES, FLAT_TOP_MIN_FRACTION * width)


def _longest_run(mask: np.ndarray) -> int:
    if not mask.any():
        return 0
    padded = np.concatenate(([False], mask, [False])).astype(np.int8)
    edges = np.flatnonzero(np.diff(padded))
    return int(np.max(edges[1::2] - edges[::2]))


def summarise(values: ArrayLike, reasons: Sequence[str]) -> Measured:
    """The mean of the rows measured and its standard error; NaN with the commonest reason when
    no row was measured.  One measured row gives no uncertainty."""
    vals = np.atleast_1d(np.asarray(values, dtype=np.float64))
    ok = np.array([not r for r in reasons], dtype=bool) & np.isfinite(vals)
    if not ok.any():
        why = Counter(r for r in reasons if r).most_common(1)
        return Measured.refused(why[0][0] if why else NON_FINITE)
    good = vals[ok]
    err = float(good.std(ddof=1) / np.sqrt(good.size)) if good.size > 1 else None
    return Measured(value=float(good.mean()), uncertainty=err)


def refuse_rows(values: np.ndarray, reasons: Sequence[str]) -> np.ndarray:
    """``values`` (float64, one per row) with NaN where a row was refused."""
    out = np.array(values, dtype=np.float64)
    out[[bool(r) for r in reasons]] = np.nan
    return out
