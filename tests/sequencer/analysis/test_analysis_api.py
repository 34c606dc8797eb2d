"""The fixed public interface of sequencer.analysis (DESIGN.md, analysis issue)."""

from __future__ import annotations

import dataclasses
import inspect

import pytest

import sequencer.analysis as analysis

# DESIGN.md "Analysis functions (importable from sequencer.analysis)" and the issue's signatures
FIXED = {
    "fit_line": ["x", "y", "sigma"],
    "inl_percent": ["x", "y", "method"],
    "baseline_rms": ["traces", "n_baseline"],
    "pulse_height": ["traces", "dt_ns", "n_baseline", "method"],
    "rise_time": ["traces", "dt_ns", "n_baseline", "low", "high"],
    "peaking_time": ["traces", "dt_ns", "t0_ns"],
    "zero_crossing_time": ["traces", "dt_ns", "t0_ns"],
    "fit_s_curve": ["thresholds", "fired", "trials"],
    "crosstalk_percent": ["aggressor", "victim", "dt_ns", "n_baseline"],
    "enc_electrons": ["noise_mV", "gain_mV_per_fC"],
}


@pytest.mark.parametrize("name", sorted(FIXED))
def test_fixed_names_and_leading_parameters(name: str) -> None:
    assert name in analysis.__all__
    params = list(inspect.signature(getattr(analysis, name)).parameters)
    assert params[: len(FIXED[name])] == FIXED[name]


def test_defaults_of_the_issue() -> None:
    sig = inspect.signature
    assert sig(analysis.fit_line).parameters["sigma"].default is None
    assert sig(analysis.inl_percent).parameters["method"].default == "best-fit"
    assert sig(analysis.pulse_height).parameters["method"].default == "peak"
    assert sig(analysis.rise_time).parameters["low"].default == 0.1
    assert sig(analysis.rise_time).parameters["high"].default == 0.9


def test_result_fields_and_frozen() -> None:
    fields = {
        analysis.LineFit: [
            "slope",
            "intercept",
            "slope_err",
            "intercept_err",
            "chi2_ndf",
            "residuals",
        ],
        analysis.SCurveFit: ["mu", "sigma", "mu_err", "sigma_err", "chi2_ndf"],
        analysis.TransferFit: ["gain", "gain_err", "offset_mV", "offset_err", "inl_pct"],
        analysis.ThresholdCalibration: ["slope", "offset_mV", "offset_err"],
    }
    for cls, names in fields.items():
        got = [f.name for f in dataclasses.fields(cls)]
        assert got[: len(names)] == names
    fit = analysis.fit_line([0, 1, 2], [0, 1, 2.5])
    with pytest.raises(dataclasses.FrozenInstanceError):
        fit.slope = 2.0  # type: ignore[misc]


def test_all_names_resolve() -> None:
    for name in analysis.__all__:
        assert hasattr(analysis, name), name
