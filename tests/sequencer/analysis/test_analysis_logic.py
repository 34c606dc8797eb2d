"""Logic-pulse duration between the 50 % crossings.

Reference: IEEE Std 181-2011, pulse duration = the interval between the 50 % reference-level
instants of the leading and trailing transitions (clause from memory); for a trapezoid with linear
edges of duration e starting at t₀ and a top from t₀ + e to t₀ + e + w (falling over e), the 50 %
instants are t₀ + e/2 and t₀ + w + 3e/2: the duration is w + e exactly (geometry).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sequencer.analysis import pulse_duration


def _trapezoid(t, t0, edge, top, height=800.0):
    rise = np.clip((t - t0) / edge, 0, 1)
    fall = np.clip((t0 + 2 * edge + top - t) / edge, 0, 1)
    return height * np.minimum(rise, fall)


@pytest.mark.parametrize("t0,edge,top", [(5.0, 0.5, 10.0), (7.33, 1.7, 3.1), (2.0, 0.2, 40.0)])
def test_duration_of_trapezoids(t0, edge, top):
    dt = 0.2
    t = dt * np.arange(400)
    width = pulse_duration(_trapezoid(t, t0, edge, top), dt, 400.0)
    # linear interpolation on linear edges is exact
    assert width == pytest.approx(top + edge, abs=1e-9)


def test_rows_baseline_and_refusals():
    dt, t = 0.2, 0.2 * np.arange(300)
    rows = np.vstack(
        [
            _trapezoid(t, 5.0, 0.5, 10.0) + 3.0,  # a baseline of 3 mV: subtracted
            np.zeros(t.size),  # no pulse
            _trapezoid(t, 55.0, 0.5, 100.0),  # no trailing edge in the record
        ]
    )
    out = pulse_duration(rows, dt, 400.0, n_baseline=10)
    assert out[0] == pytest.approx(10.5, abs=1e-9)
    assert math.isnan(out[1]) and math.isnan(out[2])
    with pytest.raises(ValueError):
        pulse_duration(rows, 0.0, 400.0)
