"""Effective bandwidth (−3 dB point) from the amplitudes of fitted sines.

References: the magnitude response of analogue low-pass filters from scipy.signal (``freqs`` of a
one-pole RC and of ``butter(N, ωc, analog=True)``): each is −3.0103 dB (1/√2) at its corner
frequency by definition of the corner (circuit theory, standard; Butterworth: |H|² = 1/(1 + (f/fc)^2N)).
Aliasing: a sine at f sampled at fs appears at |f − fs·round(f/fs)| (Nyquist-Shannon, standard).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from sequencer.analysis import aliased_frequency, effective_bandwidth, fit_sine_4

FC = 250e6


def _magnitude(b, a, f_hz):
    _, h = signal.freqs(b, a, worN=2 * math.pi * np.asarray(f_hz))
    return np.abs(h)


@pytest.mark.parametrize("order", [1, 2, 4])
def test_corner_of_scipy_butterworth_low_passes(order):
    wc = 2 * math.pi * FC
    b, a = signal.butter(order, wc, analog=True) if order > 1 else ([wc], [1.0, wc])
    f = np.geomspace(1e6, 1e9, 61)  # 10 points a decade
    result = effective_bandwidth(f, 400.0 * _magnitude(b, a, f))
    # linear interpolation in (log f, dB) between points 4.7 % apart: the steeper the roll-off, the
    # straighter the curve there; within 1 % of the corner (our tolerance)
    assert result.frequency_3db_hz == pytest.approx(FC, rel=0.01)
    assert result.reason == "" and result.gain_db[0] == 0.0


def test_a_point_at_the_corner_gives_the_corner_exactly():
    wc = 2 * math.pi * FC
    f = np.array([1e6, 100e6, 200e6, FC, 300e6])
    result = effective_bandwidth(f, _magnitude([wc], [1.0, wc], f))
    # scipy's |H(fc)| = 1/√2 relative to |H(1 MHz)| = 1/√(1 + 1.6e-5): a hair below −3.0103 dB
    assert result.frequency_3db_hz == pytest.approx(FC, rel=1e-4)


def test_a_curve_that_stays_above_minus_3_db_is_refused_with_its_reason():
    f = np.array([1e6, 10e6, 50e6])
    result = effective_bandwidth(f, [1.0, 0.95, 0.8])
    assert math.isnan(result.frequency_3db_hz)
    assert "above -3 dB up to the highest frequency scanned (50 MHz" in result.reason


def test_bad_inputs_are_refused():
    with pytest.raises(ValueError, match="> 0"):
        effective_bandwidth([1e6, 2e6], [1.0, 0.0])
    with pytest.raises(ValueError, match="twice"):
        effective_bandwidth([1e6, 1e6], [1.0, 0.5])
    with pytest.raises(ValueError, match="non-finite"):
        effective_bandwidth([1e6, 2e6], [1.0, math.nan])


def test_an_aliased_sine_is_fitted_at_its_alias_with_its_amplitude():
    fs, f = 500e6, 412.3456e6  # above Nyquist: shows at 500 - 412.3456 = 87.6544 MHz
    assert aliased_frequency(f, fs) == pytest.approx(87.6544e6)
    assert aliased_frequency(1e9 + 3e6, fs) == pytest.approx(3e6)
    t = np.arange(8192) / fs
    record = 300.0 * np.sin(2 * math.pi * f * t + 0.3)
    fit = fit_sine_4(record, fs, aliased_frequency(f, fs))
    assert fit.amplitude == pytest.approx(300.0, rel=1e-9)
    assert fit.frequency_hz == pytest.approx(87.6544e6, rel=1e-9)
