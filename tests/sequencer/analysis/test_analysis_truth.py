"""Signed analyses, IEEE 181 state levels, fitted onsets and the refusals (issue 15).

References: single-pole 10-90 % rise ln 9·τ (circuit theory, from memory); IEEE Std 181-2011 state
levels by the histogram method (clauses 5.2-5.3 from memory); CR-RCⁿ peaking time n·τ and bipolar
CR²-RCⁿ positive peak (n+1-√(n+1))·τ (Spieler 2005 ch. 4) — all as listed in REFERENCES.md.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from analysis_shapes import bipolar, cr_rc, single_pole_step, time_axis

from sequencer.analysis import (
    Measured,
    baseline_level,
    baseline_rms,
    crosstalk_percent,
    crosstalk_reasons,
    onset_and_peaking_time,
    peaking_time,
    pulse_height,
    pulse_onset,
    pulse_reasons,
    rise_time,
    state_levels,
    summarise,
    zero_crossing_time,
)

LN9 = math.log(9.0)  # REFERENCES.md: single-pole 10-90 % rise = ln 9 · τ


def _shaped(order: int, kind: str, t: np.ndarray, onset: float, tau: float) -> np.ndarray:
    """Unit-peak CR-RCⁿ or CR²-RCⁿ (Spieler 2005 ch. 4) starting at ``onset``."""
    shape = cr_rc if kind == "unipolar" else bipolar
    x_peak = order if kind == "unipolar" else order + 1 - math.sqrt(order + 1)
    return shape(t, onset, tau, order) / float(shape(np.array([x_peak * tau]), 0.0, tau, order)[0])


def _peak_x(order: int, kind: str) -> float:
    return float(order) if kind == "unipolar" else order + 1 - math.sqrt(order + 1)


# -- IEEE 181 state levels ----------------------------------------------------------------------


def test_single_pole_step_with_noise_rise_is_ln9_tau_within_2_percent() -> None:
    # REFERENCES.md: t_r = ln 9 · τ; IEEE 181 takes the high state from the histogram, not the max.
    tau, dt = 10.0, 0.1
    t = time_axis(3000, dt)
    rng = np.random.default_rng(15)
    rows = 100.0 * single_pole_step(t, 20.0, tau) + 1.0 * rng.standard_normal((40, t.size))
    rises = rise_time(rows, dt, 150)
    assert np.mean(rises) == pytest.approx(LN9 * tau, rel=0.02)
    low, high = state_levels(rows, 150)
    np.testing.assert_allclose(high - low, 100.0, rtol=0.005)  # the plateau, within 0.5 σ
    assert np.all(rows.max(axis=1) > 102.0)  # the largest sample sits 2+ σ above it


def test_negative_step_has_the_same_rise_time() -> None:
    tau, dt = 10.0, 0.1
    t = time_axis(3000, dt)
    step = 3.0 + 100.0 * single_pole_step(t, 20.0, tau)
    assert rise_time(-step, dt, 150, polarity=-1) == pytest.approx(LN9 * tau, rel=2e-4)
    assert math.isnan(rise_time(-step, dt, 150))  # read as positive: the wrong polarity


# -- onsets and peaking times -------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["unipolar", "bipolar"])
@pytest.mark.parametrize("order", [1, 2, 3, 4])
@pytest.mark.parametrize("polarity", [1, -1])
def test_shaped_peaking_time_counts_from_the_delayed_onset(
    order: int, kind: str, polarity: int
) -> None:
    # REFERENCES.md: CR-RCⁿ peaks at n·τ, CR²-RCⁿ at (n+1-√(n+1))·τ after the onset.  The pulse
    # starts 37 ns after the trigger (a cable delay) and sits on a -12 mV baseline with 1 mV noise.
    tau, dt, trigger, delay = 50.0, 4.0, 100.0, 37.0
    t = time_axis(400, dt)
    rng = np.random.default_rng(order * 10 + (kind == "bipolar") + (polarity > 0))
    clean = -12.0 + polarity * 300.0 * _shaped(order, kind, t, trigger + delay, tau)
    rows = clean + 1.0 * rng.standard_normal((4, t.size))
    peaking = peaking_time(rows, dt, n_baseline=20, polarity=polarity)
    np.testing.assert_allclose(peaking, _peak_x(order, kind) * tau, rtol=0.02)
    np.testing.assert_allclose(
        pulse_onset(rows, dt, 20, polarity=polarity), trigger + delay, atol=1.5
    )
    # counted from the trigger, the delay would be in it
    assert np.all(peaking_time(rows, dt, trigger, n_baseline=20, polarity=polarity) > 1.1 * peaking)


@pytest.mark.parametrize("kind", ["unipolar", "bipolar"])
def test_onset_and_peaking_time_from_one_fit_are_the_two_functions_values(kind: str) -> None:
    # REFERENCES.md: CR-RC³ peaks at 3·τ (CR²-RC³ at (4-2)·τ) after its onset; the one-fit function
    # gives exactly what pulse_onset and peaking_time give, including the refused (NaN) row
    tau, dt, onset = 50.0, 4.0, 137.0
    t = time_axis(400, dt)
    rng = np.random.default_rng(21)
    rows = -5.0 + 200.0 * _shaped(3, kind, t, onset, tau) + rng.standard_normal((3, t.size))
    rows[2] = -5.0 + rng.standard_normal(t.size)  # no pulse: refused by both
    start, peaking = onset_and_peaking_time(rows, dt, 20)
    np.testing.assert_array_equal(start, pulse_onset(rows, dt, 20))
    np.testing.assert_array_equal(peaking, peaking_time(rows, dt, n_baseline=20))
    np.testing.assert_allclose(peaking[:2], _peak_x(3, kind) * tau, rtol=0.02)
    np.testing.assert_allclose(start[:2], onset, atol=1.5)
    assert math.isnan(start[2]) and math.isnan(peaking[2])


def test_bipolar_zero_crossing_of_a_negative_pulse() -> None:
    # REFERENCES.md: the bipolar CR²-RCⁿ crosses zero at (n+1)·τ
    tau, dt, t0 = 40.0, 1.0, 150.0
    trace = -bipolar(time_axis(3000, dt), t0, tau, 2)
    assert zero_crossing_time(trace, dt, t0, polarity=-1) == pytest.approx(3 * tau, abs=1e-3)


# -- signed heights and crosstalk ---------------------------------------------------------------


def test_heights_carry_the_polarity() -> None:
    t = time_axis(1000, 1.0)
    shape = _shaped(2, "unipolar", t, 300.0, 25.0)
    neg = 7.0 - 250.0 * shape
    assert pulse_height(neg, 1.0, 100, polarity=-1) == pytest.approx(-250.0, rel=1e-4)
    assert pulse_height(neg, 1.0, 100, "template", polarity=-1) == pytest.approx(-250.0, rel=1e-9)
    assert math.isnan(pulse_height(neg, 1.0, 100))  # read as positive: refused, not 0.78 mV


@pytest.mark.parametrize("polarity", [1, -1])
def test_crosstalk_is_signed_for_either_polarity(polarity: int) -> None:
    t = time_axis(800, 1.0)
    agg = polarity * 300.0 * _shaped(2, "unipolar", t, 200.0, 20.0)
    rng = np.random.default_rng(3)
    noise = 0.05 * rng.standard_normal((2, t.size))
    upright = 0.01 * agg + noise[0]
    inverted = -0.005 * agg + noise[1]
    assert crosstalk_percent(agg, upright, 1.0, 100, polarity=polarity) == pytest.approx(
        1.0, abs=0.01
    )
    assert crosstalk_percent(agg, inverted, 1.0, 100, polarity=polarity) == pytest.approx(
        -0.5, abs=0.01
    )
    assert math.isnan(crosstalk_percent(agg, upright, 1.0, 100, polarity=-polarity))


# -- refusals, one reason per function ----------------------------------------------------------

T = time_axis(1000, 1.0)
RNG = np.random.default_rng(99)
NOISE = 0.5 * RNG.standard_normal(T.size)
PULSE = 100.0 * _shaped(4, "unipolar", T, 300.0, 40.0) + NOISE
CASES = {
    "no pulse": (NOISE, "no pulse above 5 σ of the baseline noise"),
    "wrong polarity": (-PULSE, "pulse of the wrong polarity"),
    "flat top": (np.minimum(PULSE, 60.0), "flat-topped pulse"),
}
RAILS = (-4.0, 4.0)


@pytest.mark.parametrize("case", sorted(CASES))
def test_each_pulse_function_refuses_with_the_reason(case: str) -> None:
    trace, reason = CASES[case]
    assert pulse_reasons(trace[None, :], 200)[0].startswith(reason)
    assert math.isnan(pulse_height(trace, 1.0, 200))
    assert math.isnan(pulse_height(trace, 1.0, 200, "template", template=PULSE - NOISE))
    assert math.isnan(peaking_time(trace, 1.0, n_baseline=200))
    assert math.isnan(pulse_onset(trace, 1.0, 200))
    agg_reason = crosstalk_reasons(trace, PULSE, 200)[0]
    assert agg_reason.startswith(f"aggressor: {reason}")
    assert math.isnan(crosstalk_percent(trace, 0.01 * PULSE, 1.0, 200))
    if case != "flat top":  # a step's plateau is flat: the transition duration does not refuse it
        assert math.isnan(rise_time(trace, 1.0, 200))


def test_clipped_captures_are_refused_by_every_analysis() -> None:
    # a baseline 5 mV off on a ±4 mV range sits on the rail: its RMS reads ~0
    sitting = np.clip(5.0 + NOISE, *RAILS)
    assert baseline_rms(sitting, 1000) < 0.1  # what an unchecked analysis would report
    assert math.isnan(baseline_rms(sitting, 1000, rails_mV=RAILS))
    assert math.isnan(baseline_level(sitting, 1000, rails_mV=RAILS))
    reason = pulse_reasons(sitting[None, :], 200, rails_mV=RAILS)[0]
    at_rail = np.mean(sitting >= 4.0 - 1e-3 * 8.0)  # within 0.1 % of full scale of the rail
    assert at_rail > 0.9 and reason == f"clipped: {100 * at_rail:.3g} % of samples at the rail"
    clipped = np.clip(PULSE, -50.0, 50.0)
    why = pulse_reasons(clipped[None, :], 200, rails_mV=(-50.0, 50.0))[0]
    frac = np.mean(np.abs(clipped) >= 50.0 - 0.1)
    assert why == f"clipped: {100 * frac:.3g} % of samples at the rail"
    for value in (
        pulse_height(clipped, 1.0, 200, rails_mV=(-50, 50)),
        rise_time(clipped, 1.0, 200, rails_mV=(-50, 50)),
        peaking_time(clipped, 1.0, n_baseline=200, rails_mV=(-50, 50)),
        crosstalk_percent(clipped, 0.01 * PULSE, 1.0, 200, rails_mV=(-50, 50)),
        crosstalk_percent(PULSE, sitting, 1.0, 200, victim_rails_mV=RAILS),
    ):
        assert math.isnan(value)
    # a quiet baseline well inside the range is measured
    assert baseline_rms(NOISE, 1000, rails_mV=RAILS) == pytest.approx(np.std(NOISE))
    assert baseline_level(NOISE - 1.0, 1000, rails_mV=RAILS) == pytest.approx(np.mean(NOISE) - 1.0)


def test_summary_keeps_the_reason() -> None:
    assert summarise([1.0, 3.0], ["", ""]) == Measured(2.0, 1.0, "")
    assert summarise([1.0, np.nan], ["", "clipped: 5 % of samples at the rail"]).value == 1.0
    refused = summarise([np.nan, np.nan], ["pulse of the wrong polarity"] * 2)
    assert math.isnan(refused.value) and refused.reason == "pulse of the wrong polarity"
    assert not refused.measured
    with pytest.raises(ValueError, match="polarity must be"):
        pulse_height(PULSE, 1.0, 200, polarity=0)
