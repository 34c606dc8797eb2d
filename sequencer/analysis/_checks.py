"""Input coercion and validation shared by the analysis functions (no I/O, no state).

Every check raises :class:`ValueError` with a message that names the argument and what is wrong,
in the style of scipy: validate and coerce first, then call a vectorised kernel.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike


def as_traces(traces: ArrayLike, name: str = "traces") -> tuple[np.ndarray, bool]:
    """``traces`` as a 2-D array (one trace a row) and whether the input was a single 1-D trace.

    Floating inputs keep their dtype (float32 stays float32: no copy of a large capture); anything
    else becomes float64.  Non-finite samples are not scanned for here (that would be another pass
    over a large capture): the kernels reject rows whose result they make non-finite.
    """
    arr = np.asarray(traces)
    if not np.issubdtype(arr.dtype, np.floating):
        try:
            arr = arr.astype(np.float64)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"{name} must be numeric samples, got dtype {arr.dtype}") from exc
    if arr.ndim not in (1, 2):
        raise ValueError(
            f"{name} must be 1-D (one trace) or 2-D (one trace a row), got shape {arr.shape}"
        )
    one = arr.ndim == 1
    arr2 = arr[np.newaxis, :] if one else arr
    if arr2.shape[0] == 0 or arr2.shape[1] == 0:
        raise ValueError(f"{name} is empty (shape {arr.shape})")
    return arr2, one


def as_points(values: ArrayLike, name: str, *, min_len: int = 1) -> np.ndarray:
    """A finite 1-D float64 vector of at least ``min_len`` values."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be numbers: {exc}") from exc
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be 1-D, got shape {arr.shape}")
    if arr.size < min_len:
        raise ValueError(f"{name} needs at least {min_len} values, got {arr.size}")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise ValueError(f"{name} has non-finite values (NaN or inf) at indices {_few(bad)}")
    return arr


def same_length(a: np.ndarray, b: np.ndarray, name_a: str, name_b: str) -> None:
    """Raise unless the two 1-D vectors have the same length."""
    if a.shape != b.shape:
        raise ValueError(f"{name_a} and {name_b} differ in length: {a.size} vs {b.size}")


def positive(value: Any, name: str) -> float:
    """A finite number > 0."""
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be a number, got {value!r}") from exc
    if not np.isfinite(v) or v <= 0.0:
        raise ValueError(f"{name} must be a finite number > 0, got {value!r}")
    return v


def n_baseline_for(
    n_baseline: Any, n_samples: int, *, minimum: int = 1, whole_trace: bool = False
) -> int:
    """``n_baseline`` as an int from ``minimum`` up to ``n_samples - 1`` (or ``n_samples`` when
    ``whole_trace``: a baseline-only record)."""
    if isinstance(n_baseline, bool) or not isinstance(n_baseline, int | np.integer):
        raise ValueError(f"n_baseline must be an integer number of samples, got {n_baseline!r}")
    n = int(n_baseline)
    if n < minimum:
        raise ValueError(f"n_baseline must be at least {minimum} samples, got {n}")
    if n > n_samples or (n == n_samples and not whole_trace):
        room = "" if whole_trace else " and leave samples for the pulse"
        raise ValueError(f"n_baseline ({n}) must fit in the {n_samples} samples of a trace{room}")
    return n


def per_row(values: np.ndarray, one: bool) -> float | np.ndarray:
    """A Python float for a single trace, else a float64 array with one value per row."""
    out = np.asarray(values, dtype=np.float64)
    return float(out[0]) if one else out


def finite_rows(values: np.ndarray, what: str) -> None:
    """Raise if any per-row result is non-finite: that row held NaN or inf samples."""
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise ValueError(f"{what}: NaN or inf samples in trace rows {_few(bad)}")


def _few(idx: np.ndarray, limit: int = 8) -> str:
    shown = ", ".join(str(int(i)) for i in idx[:limit])
    return f"[{shown}{', ...' if idx.size > limit else ''}] ({idx.size} in all)"
