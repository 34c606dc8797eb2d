"""Figures of merit from captured traces and scans: pure functions on numpy arrays, no I/O.

Units: times in ns, voltages in mV unless a name says otherwise.  Functions on traces take a 1-D
trace or a 2-D array (one trace a row) and return a float or one value per row.  Wrong inputs
raise ValueError with a message that names the argument.
"""

from __future__ import annotations

from .adaptive import AdaptiveSCurve, ScanTargets
from .bandwidth import Bandwidth, aliased_frequency, effective_bandwidth
from .codedensity import CodeDensity, code_density, dnl_from_transitions
from .coincidence import (
    DelayCurve,
    Efficiency,
    accidental_rate_hz,
    coincidence_efficiency,
    fit_delay_curve,
)
from .crosstalk import crosstalk_db, crosstalk_peak_percent, crosstalk_percent, crosstalk_reasons
from .discriminator import (
    Jitter,
    Walk,
    constant_fraction_times,
    expected_jitter_ns,
    leading_edge_times,
    time_walk,
    timing_jitter,
)
from .fingers import FingerFit, fit_finger_histogram, fit_finger_spectrum
from .landau import (
    LANDAU_MODE,
    LandauFit,
    fit_landau_gauss,
    fit_landau_histogram,
    landau_gauss_pdf,
)
from .levels import state_levels
from .lines import LineFit, fit_line, inl_percent, inl_with_uncertainty
from .logic import pulse_duration
from .noise import ELEMENTARY_CHARGE_C, TraceAverage, average_traces, enc_electrons
from .photoelectrons import (
    MeanPhotoelectrons,
    crosstalk_lambda,
    crosstalk_probability,
    generalised_poisson_pmf,
    mean_photoelectrons,
)
from .pulses import baseline_level, baseline_rms, pretrigger_baseline, pulse_height
from .refusals import Measured, pulse_reasons, summarise
from .scurves import SCurveFit, fit_s_curve
from .shaping import Reconstruction, crrc_fwhm_tau, reconstruct_amplitude, samples_above_half
from .sinefit import SineFit, enob, estimate_frequency, fit_sine_3, fit_sine_4, sinad_db
from .sipm import (
    BreakdownFit,
    Staircase,
    breakdown_at_reference,
    breakdown_voltage,
    dark_count_staircase,
)
from .thresholds import ThresholdCalibration, noise_rate, rice_nu0, threshold_calibration
from .timing import (
    onset_and_peaking_time,
    peaking_time,
    pulse_onset,
    rise_time,
    zero_crossing_time,
)
from .transfer import TransferFit, transfer_curve

__all__ = [
    "ELEMENTARY_CHARGE_C",
    "LANDAU_MODE",
    "AdaptiveSCurve",
    "Bandwidth",
    "BreakdownFit",
    "CodeDensity",
    "DelayCurve",
    "Efficiency",
    "FingerFit",
    "Jitter",
    "LandauFit",
    "LineFit",
    "MeanPhotoelectrons",
    "Measured",
    "Reconstruction",
    "SCurveFit",
    "ScanTargets",
    "SineFit",
    "Staircase",
    "ThresholdCalibration",
    "TraceAverage",
    "TransferFit",
    "Walk",
    "accidental_rate_hz",
    "aliased_frequency",
    "average_traces",
    "baseline_level",
    "baseline_rms",
    "breakdown_at_reference",
    "breakdown_voltage",
    "code_density",
    "coincidence_efficiency",
    "constant_fraction_times",
    "crosstalk_db",
    "crosstalk_lambda",
    "crosstalk_peak_percent",
    "crosstalk_percent",
    "crosstalk_probability",
    "crosstalk_reasons",
    "crrc_fwhm_tau",
    "dark_count_staircase",
    "dnl_from_transitions",
    "effective_bandwidth",
    "enc_electrons",
    "enob",
    "estimate_frequency",
    "expected_jitter_ns",
    "fit_delay_curve",
    "fit_finger_histogram",
    "fit_finger_spectrum",
    "fit_landau_gauss",
    "fit_landau_histogram",
    "fit_line",
    "fit_s_curve",
    "fit_sine_3",
    "fit_sine_4",
    "generalised_poisson_pmf",
    "inl_percent",
    "inl_with_uncertainty",
    "landau_gauss_pdf",
    "leading_edge_times",
    "mean_photoelectrons",
    "noise_rate",
    "onset_and_peaking_time",
    "peaking_time",
    "pretrigger_baseline",
    "pulse_duration",
    "pulse_height",
    "pulse_onset",
    "pulse_reasons",
    "reconstruct_amplitude",
    "rice_nu0",
    "rise_time",
    "samples_above_half",
    "sinad_db",
    "state_levels",
    "summarise",
    "threshold_calibration",
    "time_walk",
    "timing_jitter",
    "transfer_curve",
    "zero_crossing_time",
]
