"""The quantity names of DESIGN.md (a fixed interface) and their units.

A leaf module: the procedure layer checks limits against it, the engine labels measurements with it,
the reports print it.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from types import MappingProxyType

#: The "channel" of a run whose measurements all belong to the module as a whole (a coincidence
#: unit, a digitizer's converter): its certificate is numbered ``CH00`` and a batch counts it once.
MODULE_CHANNEL = 0


def judged_channels(channels: Iterable[int | None]) -> list[int]:
    """The channels a run's measurements belong to (``channels``: each measurement's channel, None
    for a value of the board as a whole), sorted; ``[MODULE_CHANNEL]`` when there are measurements
    but none of a channel (a module measured as a whole); ``[]`` when there are none."""
    seen = list(channels)
    found = sorted({int(c) for c in seen if c is not None})
    return found or ([MODULE_CHANNEL] if seen else [])

QUANTITY_UNITS: Mapping[str, str] = MappingProxyType(
    {
        "gain": "V/V",
        "offset_mV": "mV",
        "inl_pct": "%",
        "noise_in_mV": "mV",
        "crosstalk_pct": "%",
        "threshold_mV": "mV",
        "threshold_sigma_mV": "mV",
        "discriminator_offset_mV": "mV",
        "peaking_time_ns": "ns",
        "rise_time_ns": "ns",
        "leakage_nA": "nA",
        "resolving_time_ns": "ns",
        "coincidence_plateau_hz": "Hz",
        "coincidence_efficiency_pct": "%",
        "accidental_ratio": "1",
        # light sensors (SiPM) and scintillator modules
        "sipm_gain": "1e6",
        "pe_gain_mV": "mV",
        "pedestal_mV": "mV",
        "mean_pe": "p.e.",
        "breakdown_V": "V",
        "breakdown_ref_V": "V",
        "gain_slope": "1e6/V",
        "dcr_kHz": "kHz",
        "optical_crosstalk_pct": "%",
        "excess_charge_factor": "1",
        "light_yield_pe": "p.e.",
        "muon_rate_hz": "Hz",
        "muon_efficiency_pct": "%",
        "baseline_mV": "mV",
        "time_walk_ns": "ns",
        "cf_walk_ns": "ns",
        "timing_jitter_ns": "ns",
        "charge_gain_mV_per_fC": "mV/fC",
        "charge_inl_pct": "%",
        "reconstruction_bias_pct": "%",
        "reconstruction_rms_pct": "%",
        "sinad_db": "dB",
        "enob_bits": "bit",
        "dnl_max_lsb": "LSB",
        "inl_max_lsb": "LSB",
        "missing_codes": "1",
        "bandwidth_mhz": "MHz",
        "zero_crossing_ns": "ns",
        "zero_crossing_walk_ns": "ns",
        "disc_walk_ns": "ns",
        "disc_jitter_ns": "ns",
        "coincidence_width_ns": "ns",
    }
)
