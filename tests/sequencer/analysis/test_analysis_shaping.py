"""Shaper to slow ADC against REFERENCES.md "Shaping amplifiers" (Spieler 2005 ch. 4; Knoll ch. 17,
from memory): the CR-RCⁿ peak nⁿe⁻ⁿ/n! at nτ and its FWHM (derived numerically there); the amplitude
reconstructed from a few slow samples against that analytic peak, its bias and RMS stated."""

import math

import numpy as np
import pytest

from sequencer.analysis import crrc_fwhm_tau, reconstruct_amplitude, samples_above_half
from sequencer.analysis.shaping import crrc_unit

TAU = 50.0
PEAK = {1: 0.367879, 2: 0.270671, 3: 0.224042, 4: 0.195367}  # nⁿe⁻ⁿ/n!, REFERENCES.md
FWHM = {1: 2.4464, 2: 3.3947, 3: 4.1312, 4: 4.7551}  # in τ, REFERENCES.md


def raw_pulse(t_ns, order, start_ns, scale=1.0):
    """v = xⁿe⁻ˣ/n! (REFERENCES.md form, not unit-peak)."""
    x = np.clip((np.asarray(t_ns) - start_ns) / TAU, 0, None)
    return scale * x**order * np.exp(-x) / math.factorial(order)


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_unit_shape_fwhm_and_samples_above_half(order):
    assert crrc_unit(order, order) == pytest.approx(1.0)
    assert crrc_fwhm_tau(order) == pytest.approx(FWHM[order], abs=5e-5)
    # a 40 MS/s slow ADC (25 ns) on τ = 50 ns: FWHM/T samples above half height
    assert samples_above_half(order, TAU, 25.0) == pytest.approx(FWHM[order] * 2, abs=1e-3)


@pytest.mark.parametrize("order", [2, 4])
def test_shape_fit_recovers_the_analytic_peak_at_any_phase(order):
    period = 25.0
    for phase in np.linspace(0, period, 7, endpoint=False):
        t = np.arange(-100.0, 600.0, period) + phase
        y = raw_pulse(t, order, start_ns=0.0, scale=1000.0)
        got = reconstruct_amplitude(t, y, order=order, tau_ns=TAU, method="shape")
        assert got.amplitude_mV == pytest.approx(1000.0 * PEAK[order], abs=1000 * 5e-7)  # 6 digits
        assert got.peak_time_ns == pytest.approx(order * TAU, abs=1e-3)  # peak at nτ


def test_parabola_bias_and_both_methods_with_noise_stated():
    # CR-RC⁴, τ = 50 ns, 25 ns sampling (9.5 samples above half height), 1 % noise, random phase.
    rng = np.random.default_rng(4)
    truth = 1000.0 * PEAK[4]
    errors = {"shape": [], "parabola": []}
    for _ in range(300):
        t = np.arange(-100.0, 700.0, 25.0) + rng.uniform(0, 25.0)
        y = raw_pulse(t, 4, 0.0, 1000.0) + rng.normal(0, 0.01 * truth, t.size)
        for method in errors:
            r = reconstruct_amplitude(t, y, order=4, tau_ns=TAU, method=method)
            errors[method].append(r.amplitude_mV / truth - 1)
    shape, parabola = (np.array(errors[m]) for m in ("shape", "parabola"))
    # stated (this seed, 300 pulses): shape fit bias +0.03 %, RMS 0.39 % (noise averaged over all
    # samples); parabola bias +0.25 % (noise: the largest noisy sample is the one picked), RMS 0.91 %
    assert abs(shape.mean()) < 0.001 and shape.std() < 0.006
    assert 0 < parabola.mean() < 0.006 and parabola.std() < 0.015
    assert shape.std() < parabola.std()  # the known shape uses every sample


def test_parabola_without_noise_is_biased_by_the_sampling_phase_only():
    # noise-free CR-RC⁴ sampled every τ/2: the parabola's error stays within ±0.15 % over the phase
    # (measured: −0.11 % .. +0.08 %), while the shape fit is exact
    truth = 1000.0 * PEAK[4]
    for phase in np.linspace(0, 25.0, 25, endpoint=False):
        t = np.arange(-100.0, 700.0, 25.0) + phase
        r = reconstruct_amplitude(
            t, raw_pulse(t, 4, 0.0, 1000.0), order=4, tau_ns=TAU, method="parabola"
        )
        assert abs(r.amplitude_mV / truth - 1) < 0.0015


def test_refusals():
    t = np.arange(0.0, 100.0, 25.0)
    with pytest.raises(ValueError, match="not bracketed"):
        reconstruct_amplitude(t, [1.0, 2.0, 3.0, 4.0], order=4, tau_ns=TAU)
    with pytest.raises(ValueError, match="method"):
        reconstruct_amplitude(t, [0.0, 2.0, 3.0, 1.0], order=4, tau_ns=TAU, method="spline")
    with pytest.raises(ValueError, match="no positive"):
        reconstruct_amplitude(t, [0.0, -2.0, -3.0, -1.0], order=4, tau_ns=TAU)
