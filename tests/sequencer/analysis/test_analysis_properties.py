"""Property tests (hypothesis): heights scale with the trace, times shift with it."""

from __future__ import annotations

import numpy as np
import pytest
from analysis_shapes import bipolar, cr_rc, time_axis
from hypothesis import given, settings
from hypothesis import strategies as st

from sequencer.analysis import (
    crosstalk_percent,
    peaking_time,
    pulse_height,
    rise_time,
    zero_crossing_time,
)

DT = 1.0
T = time_axis(1200, DT)
N_BASE = 100
PROPS = settings(max_examples=40, deadline=None)

orders = st.integers(min_value=1, max_value=4)
taus = st.floats(min_value=8.0, max_value=40.0)
starts = st.floats(min_value=150.0, max_value=300.0)
gains = st.floats(min_value=1e-3, max_value=1e4)
offsets = st.floats(min_value=-500.0, max_value=500.0)


def _noisy(order: int, tau: float, start: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return 100.0 * cr_rc(T, start, tau, order) + rng.standard_normal(T.size)


@PROPS
@given(orders, taus, starts, gains, offsets, st.integers(0, 2**16))
def test_scaling_scales_height_and_keeps_times(order, tau, start, gain, offset, seed) -> None:
    # homogeneity: the height of c·x + d is c times the height of x (c > 0), times unchanged
    trace = _noisy(order, tau, start, seed)
    moved = gain * trace + offset
    for method in ("peak", "template"):
        tmpl = cr_rc(T, start, tau, order) if method == "template" else None
        ref = pulse_height(trace, DT, N_BASE, method=method, template=tmpl)
        got = pulse_height(moved, DT, N_BASE, method=method, template=tmpl)
        assert got == pytest.approx(gain * ref, rel=1e-9, abs=1e-9 * abs(offset))
    assert rise_time(moved, DT, N_BASE) == pytest.approx(rise_time(trace, DT, N_BASE), rel=1e-9)
    assert peaking_time(moved, DT, start) == pytest.approx(peaking_time(trace, DT, start), abs=1e-9)


@PROPS
@given(orders, taus, starts, offsets, st.integers(min_value=1, max_value=300))
def test_shifting_shifts_times(order, tau, start, offset, shift) -> None:
    # translation: delaying the samples by s moves the peak by s·dt, so every time measured from
    # the pulse start (moved by s too) is unchanged, and so is the height.  Noise-free with a
    # flat baseline, so that the delay leaves the baseline window as it was.
    trace = offset + 100.0 * cr_rc(T, start, tau, order)
    later = np.concatenate([np.full(shift, trace[0]), trace[:-shift]])
    delay = shift * DT
    assert peaking_time(later, DT, start + delay) == pytest.approx(
        peaking_time(trace, DT, start), abs=1e-9
    )
    assert rise_time(later, DT, N_BASE) == pytest.approx(rise_time(trace, DT, N_BASE), abs=1e-9)
    assert pulse_height(later, DT, N_BASE) == pytest.approx(
        pulse_height(trace, DT, N_BASE), rel=1e-9
    )


@PROPS
@given(orders, taus, st.floats(min_value=0.0, max_value=200.0))
def test_continuous_shift_of_a_bipolar_pulse(order, tau, delay) -> None:
    # the shape formula itself moved by a non-integer delay: zero crossing from the start stays
    # (n+1)τ (REFERENCES.md) within linear-interpolation error
    start = 150.0 + delay
    trace = 50.0 * bipolar(T, start, tau, order)
    got = zero_crossing_time(trace, DT, start)
    assert got == pytest.approx((order + 1) * tau, abs=0.02 * DT)


@PROPS
@given(st.floats(min_value=1e-4, max_value=1.0), st.floats(min_value=0.1, max_value=1e4))
def test_crosstalk_is_scale_free(k, gain) -> None:
    # rel 1e-6: the 5 mV victim baseline cancels in float64 against pulses down to 1e-5 mV
    agg = 10.0 + gain * cr_rc(T, 200.0, 20.0, 2)
    victim = 5.0 + k * gain * cr_rc(T, 200.0, 20.0, 2)
    assert crosstalk_percent(agg, victim, DT, N_BASE) == pytest.approx(100 * k, rel=1e-6)
