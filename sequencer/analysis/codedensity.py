"""Code-density (histogram) test of a converter with a sine input: DNL and INL per code (IEEE 1241).

With a sine of amplitude A and offset C, a voltage V is seen with density p(V) = 1/(π√(A² − V²))
(V from C), so the fraction of samples below a transition T is (1/π)·arccos(−(T − C)/A).  Inverting
the cumulative histogram gives every transition the sine crossed, T[k] = C − A·cos(π·H[k]/N) with
H[k] the samples below code k, without knowing A and C first (IEEE Std 1241-2010, histogram test with
a sine, clause from memory).  Then

* code width W[k] = T[k+1] − T[k] for the codes between the lowest and highest code hit (the end
  codes collect everything beyond the last transitions and have no width);
* DNL[k] = W[k]/Q − 1, Q the mean width of those codes (gain and offset removed: terminal line);
* INL at each transition = its distance from the terminal line through the first and last transition,
  in LSB = the running sum of the DNL.

A code of the inner range that no sample fell in is a **missing code** (DNL = −1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

#: Converter resolutions accepted (the histogram has 2**bits bins).
MAX_BITS = 24


@dataclass(frozen=True, kw_only=True)
class CodeDensity:
    """DNL per inner code and INL per transition, in LSB, with the histogram they came from."""

    first_code: int  # the first inner code (the DNL of code first_code + i is dnl_lsb[i])
    dnl_lsb: np.ndarray
    inl_lsb: np.ndarray  # at transitions first_code .. first_code + len(dnl_lsb)
    counts: np.ndarray  # samples per code, 0 .. 2**bits - 1
    missing_codes: tuple[int, ...]

    @property
    def dnl_max_lsb(self) -> float:
        """Largest |DNL| (LSB)."""
        return float(np.max(np.abs(self.dnl_lsb)))

    @property
    def inl_max_lsb(self) -> float:
        """Largest |INL| (LSB)."""
        return float(np.max(np.abs(self.inl_lsb)))


def dnl_from_transitions(transitions: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """(DNL per code between consecutive transitions, INL per transition) in LSB, terminal line.

    ``transitions`` are the input levels T[k] where the output goes from code k−1 to k, in order.
    """
    t = np.asarray(transitions, dtype=np.float64)
    if t.ndim != 1 or t.size < 3:
        raise ValueError("transitions must be 1-D with at least 3 levels (two codes between them)")
    if not np.isfinite(t).all():
        raise ValueError("transitions has non-finite values")
    widths = np.diff(t)
    if np.any(widths < 0):
        raise ValueError("transitions must not decrease (a non-monotonic converter)")
    q = (t[-1] - t[0]) / widths.size
    if q <= 0:
        raise ValueError("transitions span no input range")
    dnl = widths / q - 1.0
    inl = np.concatenate([[0.0], np.cumsum(dnl)])
    return dnl, inl


def code_density(codes: ArrayLike, bits: int) -> CodeDensity:
    """DNL/INL of an ``bits``-bit converter from a record of its output codes with a sine input.

    The sine may overdrive the range or not: only transitions it crossed are measured.  Codes must
    be integers in 0 .. 2**bits − 1 (an out-of-range code is refused, not clipped).
    """
    if isinstance(bits, bool) or not isinstance(bits, int | np.integer) or not 1 < bits <= MAX_BITS:
        raise ValueError(f"bits must be an integer 2..{MAX_BITS}, got {bits!r}")
    c = np.asarray(codes)
    if c.ndim != 1 or c.size == 0:
        raise ValueError(f"codes must be a non-empty 1-D record, got shape {c.shape}")
    if not np.issubdtype(c.dtype, np.integer):
        raise ValueError(f"codes must be integers, got dtype {c.dtype}")
    lo, hi = int(c.min()), int(c.max())
    size = 1 << int(bits)
    if lo < 0 or hi >= size:
        raise ValueError(f"codes must lie in 0..{size - 1} for {bits} bits, got {lo}..{hi}")
    counts = np.bincount(c, minlength=size)
    if hi - lo < 3:
        raise ValueError(
            f"the sine covers codes {lo}..{hi} only: it needs at least two inner codes"
        )
    below = np.cumsum(counts)[lo:hi]  # samples below transition k = lo+1 .. hi
    transitions = -np.cos(np.pi * below / c.size)  # in units of A, offset C removed
    dnl, inl = dnl_from_transitions(transitions)
    inner = np.arange(lo + 1, hi)
    missing = tuple(int(k) for k in inner[counts[lo + 1 : hi] == 0])
    return CodeDensity(
        first_code=lo + 1, dnl_lsb=dnl, inl_lsb=inl, counts=counts, missing_codes=missing
    )
