"""Trace samples as bytes: ``np.save`` (never pickle) then zlib; dtype and shape kept as captured.

The samples are stored exactly as given (float64 stays float64, float32 stays float32, raw int16 ADC
codes stay int16), so a figure re-computed years later sees the same numbers.
"""

from __future__ import annotations

import io
import zlib

import numpy as np

ENCODING = "npy+zlib"
ZLIB_LEVEL = 6


def encode_samples(samples: np.ndarray) -> bytes:
    """Compressed ``.npy`` bytes of a numeric array; object arrays are refused (they would pickle)."""
    array = np.asarray(samples)
    if array.dtype.hasobject:
        raise ValueError("trace samples must be numeric, not dtype object")
    buffer = io.BytesIO()
    np.save(buffer, array, allow_pickle=False)
    return zlib.compress(buffer.getvalue(), ZLIB_LEVEL)


def decode_samples(data: bytes) -> np.ndarray:
    """The array ``encode_samples`` stored."""
    return np.load(io.BytesIO(zlib.decompress(data)), allow_pickle=False)
