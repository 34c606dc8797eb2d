"""Handlers of the light-sensor analysis kinds: finger spectrum, breakdown voltage, dark-count
staircase.  Inputs are the pulse-height histograms and counts kept as readings by name (see
``analysis.py`` for the selection rule); the figures come from ``sequencer.analysis``.

Units: the readout's pulse heights in mV; the SiPM gain in 10⁶ electrons per fired cell, from the
peak spacing through the readout channel's charge gain (``mV_per_fC``, from its own qualification):
G = (spacing / mV_per_fC) fC / e.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import Reading, RunContext
from ..judge import channel_of, measure, output_of
from ..records import StepResult
from .analysis import AnalysisInputError, _readings, _sweep

FEMTOCOULOMB = 1e-15


def _histogram(item: Reading) -> tuple[np.ndarray, np.ndarray, int]:
    """(edges mV, counts, all events) of an ``mca.acquire`` reading."""
    value = item.value
    if not isinstance(value, Mapping) or "counts" not in value:
        raise AnalysisInputError(
            f"{item.name!r} is not a pulse-height histogram (mca.acquire into)"
        )
    counts = np.asarray(value["counts"], dtype=np.float64)
    edges = np.linspace(float(value["lower_mV"]), float(value["upper_mV"]), counts.size + 1)
    total = int(counts.sum()) + int(value.get("below", 0)) + int(value.get("above", 0))
    return edges, counts, total


def _fit(item: Reading, polarity: str) -> an.FingerFit:
    """Finger fit with heights turned positive-going; positions come back in the output's sign."""
    edges, counts, total = _histogram(item)
    if polarity == "negative":
        edges, counts = -edges[::-1], counts[::-1]
    return an.fit_finger_histogram(edges, counts, total=total)


def _gain_millions(pe_mV: float, mV_per_fC: float) -> float:
    return abs(pe_mV) / mV_per_fC * FEMTOCOULOMB / an.ELEMENTARY_CHARGE_C / 1e6


def spectrum_series(
    channel: int | None, label: str, unit: str, edges: Any, counts: Any, model: Any
) -> dict[str, Any]:
    """A fitted histogram kept with the step (``results["series"]``, kind ``spectrum``): bin
    ``edges`` in ``unit``, ``counts`` and the fitted ``model`` counts per bin, for the reports."""
    return {
        "kind": "spectrum",
        "channel": channel,
        "label": label,
        "unit": unit,
        "edges": [float(e) for e in edges],
        "counts": [float(c) for c in counts],
        "model": [float(m) for m in model],
    }


def analyse_fingers(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    sign = -1.0 if a.get("polarity") == "negative" else 1.0
    item = _readings(ctx, step, a["histogram"])[-1]
    fit = _fit(item, str(a.get("polarity")))
    k = float(a["mV_per_fC"])
    # excess charge factor: mean fired cells per pulse over mean primaries (1/(1-λ) for branching
    # crosstalk, Vinogradov arXiv:1109.2014); charge in single-cell units divides by it
    ecf = float(np.arange(fit.areas.size) @ fit.areas) / _histogram(item)[2] / fit.mu
    rel = fit.gain_err / fit.gain
    g = _gain_millions(fit.gain, k)
    return StepResult(
        results={
            "chi2_ndf": fit.chi2_ndf,
            "sigma0_mV": fit.sigma0,
            "sigma1_mV": fit.sigma1,
            "series": [
                spectrum_series(
                    channel_of(step),
                    "LED finger spectrum",
                    "mV",
                    sign * fit.edges,
                    fit.counts,
                    fit.model,
                )
            ],
        },
        measurements=[
            measure(ctx, step, "sipm_gain", g, uncertainty=g * rel),
            measure(ctx, step, "pe_gain_mV", sign * fit.gain, uncertainty=fit.gain_err),
            measure(ctx, step, "mean_pe", fit.mu, uncertainty=fit.mu_err),
            measure(ctx, step, "pedestal_mV", sign * fit.pedestal, uncertainty=fit.pedestal_err),
            measure(ctx, step, "excess_charge_factor", ecf),
        ],
    )


def _temperature(ctx: RunContext, step: PlannedStep) -> float | None:
    name = step.args.get("temperature")
    if not name:
        return None
    values = [float(r.value) for r in _readings(ctx, step, name)]
    return float(np.mean(values))


def analyse_breakdown(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items = _readings(ctx, step, a["histogram"])
    volts = _sweep(items, a["x"]) * 1e-3  # a swept voltage is held in mV (canonical unit)
    k = float(a["mV_per_fC"])
    gains, errs = [], []
    for item in items:
        fit = _fit(item, str(a.get("polarity")))
        gains.append(_gain_millions(fit.gain, k))
        errs.append(gains[-1] * fit.gain_err / fit.gain)
    bd = an.breakdown_voltage(volts, gains, errs)
    results: dict[str, Any] = {
        "chi2_ndf": bd.chi2_ndf,
        "series": [
            {
                "kind": "gain_scan",
                "channel": channel_of(step),
                "bias_V": volts.tolist(),
                "gain": gains,
                "gain_err": errs,
                "breakdown_V": bd.v_bd,
                "slope": bd.slope,
            }
        ],
    }
    ms = [
        measure(ctx, step, "breakdown_V", bd.v_bd, uncertainty=bd.v_bd_err),
        measure(ctx, step, "gain_slope", bd.slope, uncertainty=bd.slope_err),
    ]
    temperature = _temperature(ctx, step)
    if temperature is not None:
        if a.get("coefficient") is None:
            raise AnalysisInputError(
                "a temperature is given but no coefficient: state dV_bd/dT (mV/K) from the "
                "sensor's data"
            )
        ref = an.breakdown_at_reference(
            bd.v_bd,
            temperature,
            reference_C=float(a.get("reference", 25.0)),
            coefficient_mV_per_K=float(a["coefficient"]),
        )
        results.update(
            temperature_C=temperature,
            reference_C=float(a.get("reference", 25.0)),
            coefficient_mV_per_K=float(a["coefficient"]),
        )
        ms.append(measure(ctx, step, "breakdown_ref_V", ref, uncertainty=bd.v_bd_err))
    return StepResult(results=results, measurements=ms)


def _earlier(ctx: RunContext, step: PlannedStep, quantity: str) -> float:
    found = ctx.measurement(quantity, channel=channel_of(step), output=output_of(step))
    if found is None or not np.isfinite(found.value):
        raise AnalysisInputError(
            f"no {quantity} measured earlier for channel {channel_of(step)}: run analyse.fingers "
            "at the same bias first"
        )
    return float(found.value)


def analyse_staircase(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items: Sequence[Reading] = _readings(ctx, step, a["counts"])
    thresholds = _sweep(items, a["x"])
    counts = [float(i.value) for i in items]
    gain = _earlier(ctx, step, "pe_gain_mV")
    pedestal = _earlier(ctx, step, "pedestal_mV")
    st = an.dark_count_staircase(
        thresholds, counts, float(a["gate"]), gain_mV=gain, baseline_mV=pedestal
    )
    return StepResult(
        results={
            "dcr_1p5_kHz": st.dcr_three_halves / 1e3,
            "series": [
                {
                    "kind": "staircase",
                    "channel": channel_of(step),
                    "thresholds_mV": thresholds.tolist(),
                    "rate_hz": [c / float(a["gate"]) for c in counts],
                    "gain_mV": gain,
                    "pedestal_mV": pedestal,
                }
            ],
        },
        measurements=[
            measure(ctx, step, "dcr_kHz", st.dcr_half / 1e3, uncertainty=st.dcr_half_err / 1e3),
            measure(
                ctx,
                step,
                "optical_crosstalk_pct",
                100.0 * st.crosstalk,
                uncertainty=100.0 * st.crosstalk_err,
            ),
        ],
    )


HANDLERS = {
    "analyse.fingers": analyse_fingers,
    "analyse.breakdown": analyse_breakdown,
    "analyse.staircase": analyse_staircase,
}
