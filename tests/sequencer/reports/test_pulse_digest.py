"""The mean pulse's digest on a certificate (``evidence.mean_pulse_sha256``) is packed with the
standard library's ``struct`` so that ``verify`` starts without numpy; it must be the SHA-256 of
the bytes it always was.

Reference: numpy -- ``np.asarray(samples, dtype="<f8").tobytes()``, IEEE 754 binary64 little-endian,
the form the certificates of earlier versions hashed (certificates already issued must still verify).
"""

from __future__ import annotations

import hashlib
import math

import numpy as np
import pytest

from sequencer.reports.evidence import mean_pulse_sha256

from .simulated_runs import shaped_pulse


@pytest.mark.parametrize(
    "samples",
    [
        (),
        (0.0,),
        (-0.0, 1.0, -1.5e-300, 5e-324, 1.7976931348623157e308),  # signed zero, subnormal, largest
        (math.nan, math.inf, -math.inf, 0.1),
        tuple(float(v) for v in 50.0 * shaped_pulse()),
    ],
)
def test_mean_pulse_digest_is_numpys_little_endian_float64(samples):
    reference = hashlib.sha256(np.asarray(samples, dtype="<f8").tobytes()).hexdigest()
    assert mean_pulse_sha256(samples) == reference


def test_a_changed_sample_changes_the_digest():
    samples = tuple(float(v) for v in 50.0 * shaped_pulse())
    nudged = (*samples[:10], math.nextafter(samples[10], math.inf), *samples[11:])
    assert mean_pulse_sha256(nudged) != mean_pulse_sha256(samples)
