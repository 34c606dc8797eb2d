"""baseline_rms and pulse_height on reference shapes, in noise, and with bad input."""

from __future__ import annotations

import numpy as np
import pytest
from analysis_shapes import cr_rc, time_axis

from sequencer.analysis import baseline_rms, pulse_height

DT = 1.0
T = time_axis(1000, DT)
N_BASE = 100
# REFERENCES.md (Spieler 2005 ch. 4): CR-RCⁿ peak value nⁿe⁻ⁿ/n!
CR_RC_PEAK = {1: 0.367879, 2: 0.270671, 3: 0.224042, 4: 0.195367}


def test_baseline_rms_matches_numpy_std() -> None:
    rng = np.random.default_rng(0)
    traces = 5.0 + 0.3 * rng.standard_normal((20, 500))
    # numpy reference: RMS about the mean is np.std with ddof=0
    np.testing.assert_allclose(baseline_rms(traces, 200), np.std(traces[:, :200], axis=1))
    assert isinstance(baseline_rms(traces[0], 200), float)
    assert baseline_rms(traces[0], 500) == pytest.approx(np.std(traces[0]))  # whole record
    with pytest.raises(ValueError, match="must fit in the 500 samples"):
        baseline_rms(traces, 501)
    with pytest.raises(ValueError, match="at least 2"):
        baseline_rms(traces, 1)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
@pytest.mark.parametrize("method", ["peak", "template"])
def test_height_of_cr_rc_pulses(order: int, method: str) -> None:
    # coarse sampling (τ/ 20) so the parabola's refinement matters
    tau = 20.0
    trace = 3.0 + 100.0 * cr_rc(T, 200.0, tau, order)
    height = pulse_height(trace, DT, N_BASE, method=method)
    assert height == pytest.approx(100.0 * CR_RC_PEAK[order], rel=2e-5)


def test_parabola_beats_the_raw_sample_on_a_coarse_grid() -> None:
    # 4 samples per τ: the largest sample misses the peak, the parabola recovers most of it
    t = time_axis(200, 5.0)
    trace = cr_rc(t, 101.3, 20.0, 2)
    raw_error = abs(trace.max() - CR_RC_PEAK[2])
    ours_error = abs(pulse_height(trace, 5.0, 10) - CR_RC_PEAK[2])
    assert ours_error < raw_error / 3


def test_2d_gives_one_value_per_row_and_float32_works() -> None:
    amps = np.array([10.0, 50.0, 200.0])
    traces = amps[:, None] * cr_rc(T, 200.0, 30.0, 4)[None, :] - 1.5
    expected = amps * CR_RC_PEAK[4]
    for arr in (traces, traces.astype(np.float32)):
        for method in ("peak", "template"):
            heights = pulse_height(arr, DT, N_BASE, method=method)
            assert heights.shape == (3,)
            np.testing.assert_allclose(heights, expected, rtol=1e-4)


def test_template_is_better_for_small_pulses_in_noise() -> None:
    # matched filter: minimum-variance amplitude for a known shape in white noise (common
    # practice; e.g. Spieler 2005 ch. 4 on optimum filtering).  Small pulse: 2 mV in 1 mV RMS noise.
    rng = np.random.default_rng(11)
    shape = cr_rc(T, 300.0, 25.0, 2)
    shape /= shape.max()
    traces = 2.0 * shape + rng.standard_normal((400, T.size))
    tmpl = pulse_height(traces, DT, N_BASE, method="template", template=shape)
    # min_snr=0: measure every row, even those the largest-sample check would refuse as noise
    # (rows whose largest noise excursion goes the other way are still refused: wrong polarity)
    peak = pulse_height(traces, DT, N_BASE, method="peak", min_snr=0.0)
    peak = peak[np.isfinite(peak)]
    assert peak.size > 300
    assert np.std(tmpl) < 0.5 * np.std(peak)
    # unbiased within 4 standard errors of the mean
    assert abs(np.mean(tmpl) - 2.0) < 4 * np.std(tmpl) / np.sqrt(tmpl.size)
    assert np.mean(peak) > 2.5  # the largest-sample estimate is biased up by the noise


def test_template_default_is_the_mean_trace() -> None:
    rng = np.random.default_rng(5)
    shape = cr_rc(T, 300.0, 25.0, 3)
    amps = rng.uniform(50, 150, 64)
    traces = amps[:, None] * shape + 0.01 * rng.standard_normal((64, T.size))
    heights = pulse_height(traces, DT, N_BASE, method="template")
    np.testing.assert_allclose(heights, amps * shape.max(), rtol=1e-3)


def test_all_noise_traces_are_refused_not_measured() -> None:
    # STYLE.md rule 20: no pulse above 5 σ of the baseline noise -> NaN, never the largest excursion
    rng = np.random.default_rng(2)
    noise = 0.3 * rng.standard_normal((50, 800))
    for method in ("peak", "template"):
        heights = pulse_height(noise, DT, N_BASE, method=method)
        assert np.all(np.isnan(heights))


@pytest.mark.parametrize("method", ["peak", "template"])
def test_nan_rows_are_named(method: str) -> None:
    traces = np.tile(cr_rc(T, 200.0, 30.0, 2), (4, 1))
    traces[2, 700] = np.nan
    with pytest.raises(ValueError, match=r"rows \[2\]"):
        tmpl = traces[0] if method == "template" else None
        pulse_height(traces, DT, N_BASE, method=method, template=tmpl)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"dt_ns": 0.0}, "dt_ns must be a finite number > 0"),
        ({"n_baseline": 0}, "at least 1"),
        ({"n_baseline": 1000}, "leave samples for the pulse"),
        ({"n_baseline": 10.5}, "integer"),
        ({"method": "area"}, "method must be one of"),
        ({"template": np.ones(1000)}, 'only with method="template"'),
        ({"method": "template", "template": np.ones(10)}, "one value per sample"),
        ({"method": "template", "template": np.zeros(1000)}, "template is flat"),
    ],
)
def test_pulse_height_rejects_bad_input(kwargs: dict, match: str) -> None:
    args = {"dt_ns": DT, "n_baseline": N_BASE, **kwargs}
    with pytest.raises(ValueError, match=match):
        pulse_height(cr_rc(T, 200.0, 30.0, 2), **args)


def test_trace_shape_errors() -> None:
    with pytest.raises(ValueError, match=r"1-D \(one trace\) or 2-D"):
        pulse_height(np.zeros((2, 2, 2)), DT, 1)
    with pytest.raises(ValueError, match="empty"):
        baseline_rms(np.zeros((0, 10)), 2)
    with pytest.raises(ValueError, match="numeric"):
        baseline_rms(np.array(["a", "b"]), 2)
