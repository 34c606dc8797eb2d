"""rise_time, peaking_time and zero_crossing_time against shaping-amplifier formulas."""

from __future__ import annotations

import math

import numpy as np
import pytest
from analysis_shapes import bipolar, cr_rc, single_pole_step, time_axis

from sequencer.analysis import peaking_time, pulse_height, rise_time, zero_crossing_time

# REFERENCES.md, 10-90 % rise of the unipolar CR-RCⁿ output (derived numerically, 4 digits)
CR_RC_RISE = {1: 0.5701, 2: 1.1533, 3: 1.6411, 4: 2.0653}
# REFERENCES.md, bipolar CR²-RCⁿ positive peak value
BIPOLAR_PEAK = {1: 0.230579, 2: 0.130602, 3: 0.090224, 4: 0.068557}


def test_single_pole_rise_is_ln9_tau() -> None:
    # REFERENCES.md: single-pole RC 10-90 % rise = ln 9 · τ (circuit theory, from memory)
    tau, dt = 10.0, 0.1
    t = time_axis(4000, dt)
    trace = 2.0 + 500.0 * single_pole_step(t, 20.0, tau)
    assert rise_time(trace, dt, 100) == pytest.approx(math.log(9) * tau, rel=2e-4)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_cr_rc_rise_times(order: int) -> None:
    tau, dt = 50.0, 0.5
    t = time_axis(3000, dt)
    trace = cr_rc(t, 100.0, tau, order)
    assert rise_time(trace, dt, 100) / tau == pytest.approx(CR_RC_RISE[order], abs=1e-4)


def test_rise_time_other_reference_levels() -> None:
    # single pole, 20-80 %: τ ln(0.8/0.2) = τ ln 4 (same circuit theory)
    tau, dt = 10.0, 0.1
    trace = single_pole_step(time_axis(4000, dt), 20.0, tau)
    assert rise_time(trace, dt, 100, low=0.2, high=0.8) == pytest.approx(
        tau * math.log(4), rel=3e-4
    )
    with pytest.raises(ValueError, match="0 < low < high < 1"):
        rise_time(trace, dt, 100, low=0.9, high=0.1)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_cr_rc_peaking_time_is_n_tau(order: int) -> None:
    # REFERENCES.md (Spieler 2005 ch. 4): peaking time n·τ; peak value nⁿe⁻ⁿ/n!
    tau, dt, t0 = 50.0, 2.5, 123.4
    trace = cr_rc(time_axis(2000, dt), t0, tau, order)
    assert peaking_time(trace, dt, t0) == pytest.approx(order * tau, abs=0.01 * dt)
    expected_peak = order**order * math.exp(-order) / math.factorial(order)
    assert pulse_height(trace, dt, 20) == pytest.approx(expected_peak, rel=1e-4)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_bipolar_timing_and_peak(order: int) -> None:
    # REFERENCES.md, bipolar CR²-RCⁿ: zero crossing (n+1)τ, positive peak (n+1-√(n+1))τ
    tau, dt, t0 = 40.0, 1.0, 150.0
    trace = bipolar(time_axis(3000, dt), t0, tau, order)
    assert zero_crossing_time(trace, dt, t0) == pytest.approx((order + 1) * tau, abs=1e-3)
    positive_peak = (order + 1 - math.sqrt(order + 1)) * tau
    assert peaking_time(trace, dt, t0) == pytest.approx(positive_peak, abs=0.01 * dt)
    # parabola through samples τ/40 apart: error well below 1e-4 of the peak
    assert pulse_height(trace, dt, 100) == pytest.approx(BIPOLAR_PEAK[order], rel=3e-5)


def test_zero_crossing_with_baseline_offset_and_per_row_t0() -> None:
    tau, dt = 40.0, 1.0
    t = time_axis(2000, dt)
    starts = np.array([100.0, 180.5, 260.25])
    traces = np.stack([50.0 + 300.0 * bipolar(t, s, tau, 2) for s in starts])
    times = zero_crossing_time(traces, dt, starts, n_baseline=80)
    # linear interpolation between samples τ/40 apart: a few ps of error
    np.testing.assert_allclose(times, 3 * tau, atol=5e-3)
    # without baseline subtraction the 50 mV offset keeps the 17 mV negative lobe above 0
    with pytest.raises(ValueError, match="no zero crossing"):
        zero_crossing_time(traces, dt, starts)


def test_unipolar_pulse_has_no_zero_crossing() -> None:
    trace = cr_rc(time_axis(2000, 1.0), 100.0, 40.0, 2)
    with pytest.raises(ValueError, match=r"rows \[0\]"):
        zero_crossing_time(trace, 1.0, 100.0)


def test_times_are_vectorised_over_rows() -> None:
    tau, dt = 30.0, 1.0
    t = time_axis(1500, dt)
    starts = np.array([100.0, 200.3, 333.3])
    traces = np.stack([cr_rc(t, s, tau, 4) for s in starts])
    np.testing.assert_allclose(peaking_time(traces, dt, starts), 4 * tau, atol=0.02)
    # 4-digit reference value, linear interpolation at τ/30 sampling: 3e-4 relative
    np.testing.assert_allclose(rise_time(traces, dt, 50), CR_RC_RISE[4] * tau, rtol=3e-4)
    with pytest.raises(ValueError, match="one value per trace"):
        peaking_time(traces, dt, [1.0, 2.0])


def test_all_noise_traces_do_not_crash() -> None:
    rng = np.random.default_rng(4)
    noise = rng.standard_normal((30, 500))
    # no pulse above 5 σ of the baseline noise: refused (NaN), not timed (STYLE.md rule 20)
    assert np.all(np.isnan(rise_time(noise, 1.0, 50)))
    assert np.all(np.isnan(peaking_time(noise, 1.0, n_baseline=50)))
    # given a start and no baseline to judge the noise by, the peak is timed as asked
    assert np.all(np.isfinite(peaking_time(noise, 1.0, 0.0)))
    assert np.all(np.isfinite(zero_crossing_time(noise, 1.0, 0.0)))
