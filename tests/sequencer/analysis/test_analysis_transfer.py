"""transfer_curve: gain, offset, INL and dynamic range of an amplitude scan."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from sequencer.analysis import fit_line, transfer_curve


def test_gain_offset_inl_of_ieee1241_example() -> None:
    # REFERENCES.md, IEEE Std 1241-2010 example: gain 9.912, offset 3.6, best-fit INL 0.181598 %
    result = transfer_curve([0, 25, 50, 75, 100], [2, 252, 501, 748, 993])
    assert result.gain == pytest.approx(9.912)
    assert result.offset_mV == pytest.approx(3.6)
    assert result.inl_pct == pytest.approx(0.181598, abs=5e-7)
    assert result.gain_err == pytest.approx(result.fit.slope_err)
    assert result.offset_err == pytest.approx(result.fit.intercept_err)


def test_weighted_transfer_uses_sigma() -> None:
    # Bevington & Robinson weighted example of REFERENCES.md, as a transfer curve
    x = np.arange(0.0, 51.0, 10.0)
    y = [1.2, 51.0, 101.9, 151.1, 202.4, 251.3]
    result = transfer_curve(x, y, sigma=[0.5, 0.5, 0.6, 0.7, 0.8, 1.0])
    assert result.gain == pytest.approx(5.014786, abs=1e-6)
    assert result.gain_err == pytest.approx(0.016590, abs=1e-6)
    assert result.offset_err == pytest.approx(0.386483, abs=1e-6)


def test_dynamic_range_of_a_hard_clip() -> None:
    # x5 output clipping at 1000 mV: deviation of 5A clipped to 1000 exceeds 1 % of 5A once
    # 5A - 1000 > 0.01 * 5A, i.e. A > 1000 / (5 * 0.99) = 202.02 mV (derived by hand)
    amps = np.arange(0.0, 401.0, 1.0)
    heights = np.minimum(5.0 * amps, 1000.0) + 0.3
    result = transfer_curve(amps, heights)
    assert result.dynamic_range_mV == 202.0


def test_dynamic_range_of_tanh_saturation_brackets_compression_points() -> None:
    # Simulator physics (DESIGN.md): output S·tanh(g·A/S).  True x % compression: tanh(u)/u = 1 - x.
    # The lower-half reference line sees 80 % of a cubic-onset compression (derived: the LS line of
    # A³ over [0, h] is 0.9h²A - 0.2h³, which at 2h leaves 6.4h³ of 8h³), so the 1 % rule ends
    # between the true 1 % and 1.25 % compression points.
    sat, gain = 1500.0, 1.0
    amps = np.arange(0.0, 1001.0, 1.0)
    heights = sat * np.tanh(gain * amps / sat)
    one_pct = optimize.brentq(lambda u: np.tanh(u) / u - 0.99, 1e-3, 1.0) * sat / gain
    one_and_quarter = optimize.brentq(lambda u: np.tanh(u) / u - 0.9875, 1e-3, 1.0) * sat / gain
    result = transfer_curve(amps, heights, deviation_pct=1.0)
    assert one_pct <= result.dynamic_range_mV <= one_and_quarter


def test_dynamic_range_scales_with_the_limit() -> None:
    sat = 1500.0
    amps = np.arange(0.0, 1501.0, 2.0)
    heights = sat * np.tanh(amps / sat)
    ranges = [transfer_curve(amps, heights, deviation_pct=p).dynamic_range_mV for p in (0.5, 1, 2)]
    # compression grows as A² at the onset (tanh(u)/u ≈ 1 - u²/3): doubling the limit moves the
    # point by about √2 (series expansion, standard)
    assert ranges[0] < ranges[1] < ranges[2]
    assert ranges[2] / ranges[1] == pytest.approx(np.sqrt(2), rel=0.05)


def test_linear_scan_has_full_dynamic_range() -> None:
    amps = np.linspace(0, 500, 26)
    result = transfer_curve(amps, 1.01 * amps + 0.2)
    assert result.dynamic_range_mV == 500.0
    assert result.inl_pct == pytest.approx(0.0, abs=1e-10)


def test_unsorted_scan_gives_same_result() -> None:
    rng = np.random.default_rng(3)
    amps = np.arange(0.0, 401.0, 5.0)
    heights = np.minimum(5.0 * amps, 1000.0)
    order = rng.permutation(amps.size)
    a = transfer_curve(amps, heights)
    b = transfer_curve(amps[order], heights[order])
    assert a.dynamic_range_mV == b.dynamic_range_mV
    assert a.gain == pytest.approx(b.gain)
    assert a.gain == pytest.approx(fit_line(amps, heights).slope)


def test_transfer_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="deviation_pct"):
        transfer_curve([0, 1, 2], [0, 1, 2], deviation_pct=0)
    with pytest.raises(ValueError, match="at least 3"):
        transfer_curve([0, 1], [0, 1])
    with pytest.raises(ValueError, match="differ in length"):
        transfer_curve([0, 1, 2, 3], [0, 1, 2])
