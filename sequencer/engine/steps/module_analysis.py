"""Handlers of the scintillator-module analysis kinds: light yield of cosmic-ray muons and the muon
rate against the expected flux.

Light yield: the coincidence-triggered pulse-height histogram of a sensor, turned into single-
photoelectron units with the gain and pedestal measured earlier at the same bias (analyse.fingers),
fitted by Landau ⊗ Gauss (scipy.stats.landau parametrisation, see sequencer.analysis.landau) between
half and three times its peak (so the coincidence threshold's edge and the sparse tail are left out);
the MPV is divided by the excess charge factor measured from the LED spectrum (mean fired cells per
primary photoelectron: optical crosstalk inflates every charge by it), giving primary photoelectrons.

Muon rate: coincidences per second minus the accidental rate 2τR₁R₂ (standard; Leo, from memory),
against the expected rate of vertical muons through the plate, area × about 1 per cm² per minute
(PDG Review of Particle Physics, "Cosmic rays", from memory) → efficiency in %.
"""

from __future__ import annotations

import math

import numpy as np

from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import channel_of, measure
from ..records import StepResult
from .analysis import AnalysisInputError, _readings
from .sensor_analysis import _earlier, _histogram, spectrum_series

FIT_FROM, FIT_TO = 0.5, 3.0
"""Fit range of the light-yield spectrum in units of its peak position (common practice)."""
FIT_BINS = 80
"""At most about this many bins in the fit range, each a whole number of photoelectrons wide."""


def analyse_light_yield(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    edges, counts, _ = _histogram(_readings(ctx, step, a["histogram"])[-1])
    gain = _earlier(ctx, step, "pe_gain_mV")
    pedestal = _earlier(ctx, step, "pedestal_mV")
    ecf = _earlier(ctx, step, "excess_charge_factor")
    pe_edges = (edges - pedestal) / gain  # a negative gain turns a negative output positive
    if pe_edges[0] > pe_edges[-1]:
        pe_edges, counts = pe_edges[::-1], counts[::-1]
    centres = 0.5 * (pe_edges[1:] + pe_edges[:-1])
    smooth = np.convolve(counts, np.ones(5) / 5.0, mode="same")
    peak = float(centres[int(np.argmax(smooth))])
    if peak <= 0:
        raise AnalysisInputError("the triggered spectrum peaks at the pedestal: no muon signal")
    inside = np.flatnonzero((centres >= FIT_FROM * peak) & (centres <= FIT_TO * peak))
    if inside.size < 8:
        raise AnalysisInputError(f"only {inside.size} bins around the peak: widen the histogram")
    lo, hi = int(inside[0]), int(inside[-1]) + 1
    # rebin to whole photoelectrons: the charge comes in fired cells, so bins of any other width
    # alias the finger structure into a comb; the fit needs tens of bins, not thousands
    width = max(1.0, round((FIT_TO - FIT_FROM) * peak / FIT_BINS))
    start = math.floor(centres[lo]) - 0.5
    pe_bins = np.arange(start, centres[hi - 1] + width, width)
    merged, _ = np.histogram(centres[lo:hi], bins=pe_bins, weights=counts[lo:hi])
    fit = an.fit_landau_histogram(pe_bins, merged)
    value = fit.mpv / ecf
    return StepResult(
        results={
            "mpv_charge_pe": fit.mpv,
            "excess_charge_factor": ecf,
            "landau_scale_pe": fit.scale,
            "sigma_pe": fit.sigma,
            "chi2_ndf": fit.chi2_ndf,
            "series": [
                spectrum_series(
                    channel_of(step),
                    "muon spectrum (coincidence trigger)",
                    "p.e.",
                    fit.edges,
                    fit.counts,
                    fit.model,
                )
            ],
        },
        measurements=[measure(ctx, step, "light_yield_pe", value, uncertainty=fit.mpv_err / ecf)],
    )


def analyse_muon_rate(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items = _readings(ctx, step, a["counts"])
    if not all(isinstance(i.value, dict) and "coincidences" in i.value for i in items):
        raise AnalysisInputError(f"{a['counts']!r} is not a coincidence.count reading")
    gate = sum(float(i.value["gate_s"]) for i in items)
    c = sum(int(i.value["coincidences"]) for i in items)
    r1 = sum(int(i.value["singles"][0]) for i in items) / gate
    r2 = sum(int(i.value["singles"][1]) for i in items) / gate
    tau_ns = float(a["resolving_time"])
    accidental = an.accidental_rate_hz(tau_ns, r1, r2)
    rate = c / gate - accidental
    expected = float(a["area_cm2"]) * float(a.get("flux_per_cm2_min", 1.0)) / 60.0
    if expected <= 0:
        raise AnalysisInputError("the expected muon rate is zero: give the plate's area")
    err = math.sqrt(max(c, 1)) / gate
    return StepResult(
        results={
            "coincidences": c,
            "gate_s": gate,
            "singles_hz": [r1, r2],
            "accidental_hz": accidental,
            "expected_hz": expected,
        },
        measurements=[
            measure(ctx, step, "muon_rate_hz", rate, uncertainty=err, channel=None, output=None),
            measure(
                ctx,
                step,
                "muon_efficiency_pct",
                100.0 * rate / expected,
                uncertainty=100.0 * err / expected,
                channel=None,
                output=None,
            ),
        ],
    )


HANDLERS = {"analyse.light_yield": analyse_light_yield, "analyse.muon_rate": analyse_muon_rate}
