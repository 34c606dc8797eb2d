"""Handlers of the ``analyse.*`` kinds: select the scope's traces and readings, call
``sequencer.analysis``, judge the figures.

Inputs are the items called by the step's name argument whose labels contain all the step's own
labels (its loop scope), in capture order; sweep values come from each item's labels (``x``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Any

import numpy as np

from drivers.trace import Trace
from sequencer import analysis as an
from sequencer.analysis.noise_stats import rms_precision
from sequencer.procedure.kinds import KINDS
from sequencer.procedure.plan_model import PlannedStep

from ..context import Reading, RunContext
from ..judge import channel_of, measure, output_of
from ..records import StepResult
from .refusing import AnalysisRefused, clip_reasons, merge, polarity, refuse_any
from .series import pulse_series, s_curve_series, transfer_series


class AnalysisInputError(ValueError):
    """The scope holds no usable inputs for an analysis step."""


def _traces(ctx: RunContext, step: PlannedStep, name: str) -> list[Trace]:
    items = ctx.select_traces(name, step.labels)
    if not items:
        raise AnalysisInputError(
            f"no traces called {name!r} captured in the scope {dict(step.labels)}"
        )
    return items


def _readings(ctx: RunContext, step: PlannedStep, name: str) -> list[Reading]:
    items = ctx.select_readings(name, step.labels)
    if not items:
        raise AnalysisInputError(f"no readings called {name!r} in the scope {dict(step.labels)}")
    return items


def _stack_mV(items: Sequence[Trace]) -> tuple[np.ndarray, float]:
    """One row per trace in mV, and the common sample interval in ns."""
    dt = items[0].dt_ns
    if any(abs(t.dt_ns - dt) > 1e-9 * dt for t in items):
        raise AnalysisInputError("traces of one analysis have different sample intervals")
    return np.vstack([t.mV for t in items]), dt


def _sweep(items: Sequence[Any], var: str) -> np.ndarray:
    try:
        return np.array([float(i.labels[var]) for i in items])
    except KeyError:
        raise AnalysisInputError(
            f"sweep variable {var!r} is not among the labels of the inputs"
        ) from None


def _mean_err(values: Any) -> tuple[float, float | None]:
    arr = np.atleast_1d(np.asarray(values, dtype=float))
    if arr.size < 2:
        return float(arr[0]), None
    return float(arr.mean()), float(arr.std(ddof=1) / np.sqrt(arr.size))


GAIN_SIGNIFICANCE = 3.0
"""A measured gain within this many standard uncertainties of zero is no gain: nothing is referred
to the input through it (a 3-sigma significance cut, common practice)."""


def _gain(ctx: RunContext, step: PlannedStep, output: str | None) -> float:
    """The gain to refer a figure to the input: the step's ``gain``, else the one measured earlier
    in the run for this channel and output, which must be distinguishable from zero."""
    given = step.args.get("gain")
    if given is not None:
        return float(given)
    where = f"channel {channel_of(step)} output {output}"
    found = ctx.measurement("gain", channel=channel_of(step), output=output)
    if found is None:
        raise AnalysisInputError(f"no gain measured earlier for {where}: give gain:")
    gain, unc = found.value, found.uncertainty
    if (
        not math.isfinite(gain)
        or gain == 0.0
        or (unc is not None and abs(gain) <= GAIN_SIGNIFICANCE * unc)
    ):
        spread = "" if unc is None else f" ± {unc:.2g}"
        raise AnalysisInputError(
            f"the gain measured for {where} ({gain:.3g}{spread} V/V) is not distinguishable "
            "from zero: nothing can be referred to the input"
        )
    return gain


def _n_baseline(step: PlannedStep, items: list[Any]) -> int:
    """The step's ``n_baseline``, or (0, the default) every pre-trigger sample of its traces."""
    trace = items[0]
    try:
        return an.pretrigger_baseline(
            int(step.args.get("n_baseline") or 0), trace.t0_ns, trace.dt_ns
        )
    except ValueError as exc:
        raise AnalysisInputError(f"traces {items[0].name!r}: {exc}") from None


MIN_PULSE_SNR = 10.0
"""A pulse to be timed, or to drive crosstalk, stands this many baseline RMS above its baseline."""


def _has_pulse(rows: np.ndarray, n_baseline: int) -> bool:
    """True when the mean of ``rows`` peaks more than ``MIN_PULSE_SNR`` baseline RMS above its
    baseline: a dead channel's noise does not have a rise time, a peak, or crosstalk to give."""
    mean = rows.mean(axis=0)
    base = mean[:n_baseline]
    height = float(mean.max() - base.mean())
    return height > 0.0 and height > MIN_PULSE_SNR * float(base.std())


def _heights(
    ctx: RunContext, step: PlannedStep, items: list[Trace]
) -> tuple[np.ndarray, np.ndarray]:
    """Signed pulse heights of every capture and their standard uncertainties: each a capture of
    ``averages`` acquisitions, its noise the baseline RMS over √(n_baseline) samples of white
    noise, times √(1 + n_baseline/Σs²)-like terms neglected (common practice for a matched filter
    over the pulse width: the height error ≈ σ_baseline · √(Σs²)/Σs², s the unit template).
    Refuses (AnalysisRefused) when any capture is clipped, has no pulse or the wrong polarity."""
    a = step.args
    rows, dt = _stack_mV(items)
    n = _n_baseline(step, items)
    sign = polarity(ctx, output_of(step))
    method = a.get("method", "peak")
    heights = np.atleast_1d(an.pulse_height(rows, dt, n, method, polarity=sign))
    why = merge(clip_reasons(items, rows), an.pulse_reasons(rows, n, polarity=sign))
    if method == "template":  # the matched filter measures what the largest sample cannot
        why = merge(
            clip_reasons(items, rows),
            ["" if h == h else r or "not measured" for h, r in zip(heights, why, strict=True)],
        )
    refuse_any(why)
    sigma = np.atleast_1d(an.baseline_rms(rows, n))
    return heights, _height_errors(rows, n, sigma, method)


def _height_errors(rows: np.ndarray, n: int, sigma: np.ndarray, method: str) -> np.ndarray:
    """Standard uncertainty of each height: the baseline noise σ of the capture (its baseline mean
    adds σ/√n) and, for the matched filter, σ/√Σs² with s the unit-peak mean pulse (white noise,
    Spieler 2005 ch. 4 on optimum filtering, from memory); for the largest sample σ itself."""
    if method != "template":
        return sigma * np.sqrt(1.0 + 1.0 / n)
    mean = rows.mean(axis=0)
    shape = mean - mean[:n].mean()
    peak = float(np.max(np.abs(shape))) or 1.0
    energy = float(np.sum((shape / peak) ** 2)) or 1.0
    return sigma * np.sqrt(1.0 / energy + 1.0 / n)


def analyse_transfer(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Gain (signed: negative on a negative-going output), offset and INL with its uncertainty."""
    a = step.args
    items = _traces(ctx, step, a["traces"])
    heights, errors = _heights(ctx, step, items)
    x = _sweep(items, a["x"])
    fit = an.transfer_curve(x, heights, deviation_pct=float(a.get("deviation", 1.0)))
    inl = an.inl_with_uncertainty(x, heights, errors)
    return StepResult(
        results={
            "points": len(items),
            "dynamic_range_mV": fit.dynamic_range_mV,
            "chi2_ndf": fit.fit.chi2_ndf,
            "series": [transfer_series(channel_of(step), output_of(step), x, heights, fit)],
            "height_err_mV": float(np.median(errors)),
        },
        measurements=[
            measure(ctx, step, "gain", fit.gain, uncertainty=fit.gain_err),
            measure(ctx, step, "offset_mV", fit.offset_mV, uncertainty=fit.offset_err),
            measure(ctx, step, "inl_pct", inl.value, uncertainty=inl.uncertainty),
        ],
    )


def analyse_noise(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Baseline RMS, corrected to a single acquisition for averaged captures (white noise falls as
    1/√N with N averages — REFERENCES.md), divided by the gain.  Its uncertainty counts the
    samples' correlation (Bartlett's effective sample count, :mod:`sequencer.analysis.noise_stats`):
    band-limited noise sampled fast has far fewer independent samples than points."""
    items = _traces(ctx, step, step.args["traces"])
    rows, _ = _stack_mV(items)
    n = int(step.args.get("n_baseline") or 0) or rows.shape[1]
    refuse_any(clip_reasons(items, rows[:, :n]))
    rms = np.atleast_1d(an.baseline_rms(rows, n))
    single = rms * np.sqrt([t.averages for t in items])
    combined = float(np.sqrt(np.mean(single**2)))
    gain = _gain(ctx, step, output_of(step))
    precision = rms_precision(rows[:, :n])
    unc = combined * precision.relative_uncertainty / abs(gain)
    found = {"baseline_rms_mV": combined, "gain": gain, "traces": len(items)}
    return StepResult(
        results={**found, "effective_samples": precision.effective},
        measurements=[measure(ctx, step, "noise_in_mV", combined / abs(gain), uncertainty=unc)],
    )


def analyse_baseline(ctx: RunContext, step: PlannedStep) -> StepResult:
    """The output's DC level with no injection: the mean of its samples.  Uncertainty: RMS/√N of
    N samples (white noise; band-limited noise makes it somewhat larger, common practice)."""
    items = _traces(ctx, step, step.args["traces"])
    rows, _ = _stack_mV(items)
    n = int(step.args.get("n_baseline") or 0) or rows.shape[1]
    refuse_any(clip_reasons(items, rows[:, :n]))
    level = float(np.mean(np.atleast_1d(an.baseline_level(rows, n))))
    rms = float(np.sqrt(np.mean(np.atleast_1d(an.baseline_rms(rows, n)) ** 2)))
    unc = rms / np.sqrt(n * len(items))
    return StepResult(
        results={"readings": {"baseline_rms_mV": rms}, "traces": len(items)},
        measurements=[measure(ctx, step, "baseline_mV", level, uncertainty=unc)],
    )


def analyse_crosstalk(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    agg = _traces(ctx, step, a["aggressor"])
    vic = _traces(ctx, step, a["victim"])
    if len(agg) != len(vic):
        raise AnalysisInputError(f"{len(agg)} aggressor traces but {len(vic)} victim traces")
    arows, dt = _stack_mV(agg)
    vrows, _ = _stack_mV(vic)
    n = _n_baseline(step, agg)
    sign = polarity(ctx, output_of(step))
    if not (_has_pulse(arows, n) or _has_pulse(-arows, n)):  # dead aggressor: nothing to drive
        return StepResult(results={"pairs": len(agg), "skipped": "the aggressor shows no pulse"})
    agg_why = merge(clip_reasons(agg, arows), an.pulse_reasons(arows, n, polarity=sign))
    refuse_any([f"aggressor: {r}" if r else "" for r in agg_why])
    refuse_any([f"victim: {r}" if r else "" for r in clip_reasons(vic, vrows)])
    pct, err = _mean_err(an.crosstalk_percent(arows, vrows, dt, n, polarity=sign))
    m = measure(
        ctx,
        step,
        "crosstalk_pct",
        pct,
        uncertainty=err,
        channel=int(a["victim_channel"]),
        aggressor=int(a["aggressor_channel"]),
    )
    return StepResult(results={"pairs": len(agg)}, measurements=[m])


def _curve_points(items: Sequence[Reading], var: str) -> tuple[np.ndarray, list[float]]:
    """Thresholds and counts of an S-curve: from the labels of a fixed sweep's readings, or from
    the gates an adaptive scan (``counter.scan``) kept in its reading."""
    if items and all(isinstance(i.value, Mapping) and "x" in i.value for i in items):
        x = np.concatenate([np.asarray(i.value["x"], dtype=float) for i in items])
        fired = [float(k) for i in items for k in i.value["fired"]]
        return x, fired
    return _sweep(items, var), [float(i.value) for i in items]


def _s_curve(
    ctx: RunContext, step: PlannedStep, thresholds: np.ndarray, counts: Sequence[float]
) -> tuple[an.SCurveFit, float]:
    """The S-curve fit and its signed 50 % point.  A negative-going output fires when the pulse
    goes below the threshold: its efficiency rises with the threshold, so the fit runs on the
    thresholds mirrored (the model of fit_s_curve falls with threshold) and μ is mirrored back."""
    sign = polarity(ctx, output_of(step))
    fit = an.fit_s_curve(sign * thresholds, list(counts), int(step.args["trials"]))
    return fit, sign * fit.mu


def analyse_s_curve(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items = _readings(ctx, step, a["counts"])
    x, counts = _curve_points(items, a["x"])
    fit, mu = _s_curve(ctx, step, x, counts)
    curve = s_curve_series(
        channel_of(step), "S-curve", x, counts, int(a["trials"]), replace(fit, mu=mu)
    )
    return StepResult(
        results={"points": len(x), "chi2_ndf": fit.chi2_ndf, "series": [curve]},
        measurements=[
            measure(ctx, step, "threshold_mV", mu, uncertainty=fit.mu_err),
            measure(ctx, step, "threshold_sigma_mV", fit.sigma, uncertainty=fit.sigma_err),
        ],
    )


def analyse_discriminator(ctx: RunContext, step: PlannedStep) -> StepResult:
    """One S-curve per injected amplitude; the intercept of μ against gain × amplitude."""
    a = step.args
    items = _readings(ctx, step, a["counts"])
    groups: dict[float, list[Reading]] = {}
    for amp, item in zip(_sweep(items, a["amplitude"]), items, strict=True):
        groups.setdefault(float(amp), []).append(item)
    gain = _gain(ctx, step, "x1")
    mus, errs, curves = [], [], []
    for amp, group in groups.items():
        x, counts = _curve_points(group, a["x"])
        fit, mu = _s_curve(ctx, step, x, counts)
        mus.append(mu)
        errs.append(fit.mu_err)
        label = f"{a['amplitude']} = {amp:g} mV"
        curves.append(
            s_curve_series(channel_of(step), label, x, counts, int(a["trials"]), replace(fit, mu=mu))
        )
    # heights signed like the output (a nominal gain is given unsigned)
    heights = polarity(ctx, "x1") * abs(gain) * np.array(list(groups))
    cal = an.threshold_calibration(heights, mus, errs)
    return StepResult(
        results={"amplitudes": list(groups), "mu_mV": mus, "slope": cal.slope, "gain": gain,
                 "series": curves},
        measurements=[
            measure(ctx, step, "discriminator_offset_mV", cal.offset_mV, uncertainty=cal.offset_err)
        ],
    )


def _pulse_rows(
    ctx: RunContext, step: PlannedStep, items: list[Trace]
) -> tuple[np.ndarray, float, int, int]:
    """Rows, sample interval, baseline samples and polarity of the captures of a timing step;
    refused (AnalysisRefused) when a capture is clipped or shows no pulse of that polarity.  The
    flat-top check is the caller's (a step's plateau is flat by nature)."""
    rows, dt = _stack_mV(items)
    n = _n_baseline(step, items)
    sign = polarity(ctx, output_of(step))
    mean_why = an.pulse_reasons(rows.mean(axis=0)[None, :], n, polarity=sign, flat_top=False)
    refuse_any(merge(clip_reasons(items, rows), mean_why * len(items)))
    return rows, dt, n, sign


def analyse_peaking(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Peaking time from the fitted onset of the shaped pulse (never the trigger: a cable delay
    is not shaping); the zero crossing of a bipolar shaper from the same onset."""
    items = _traces(ctx, step, step.args["traces"])
    rows, dt, n, sign = _pulse_rows(ctx, step, items)
    refuse_any(an.pulse_reasons(rows, n, polarity=sign))
    fitted, peaking = an.onset_and_peaking_time(rows, dt, n, polarity=sign)  # one fit per row
    onsets = np.atleast_1d(fitted)
    if not np.all(np.isfinite(onsets)):
        raise AnalysisRefused("the pulse onset could not be fitted")
    value, err = _mean_err(peaking)
    results: dict[str, Any] = {
        "traces": len(items),
        "onset_after_trigger_ns": float(np.mean(onsets)) + items[0].t0_ns,
        "series": [_pulse(step, "peaking_time_ns", value, rows, dt, items)],
    }
    try:
        zc, _ = _mean_err(an.zero_crossing_time(rows, dt, onsets, n_baseline=n, polarity=sign))
        results["zero_crossing_ns"] = zc
    except ValueError:
        pass  # unipolar shaper: no zero crossing
    return StepResult(
        results=results,
        measurements=[measure(ctx, step, "peaking_time_ns", value, uncertainty=err)],
    )


def analyse_rise(ctx: RunContext, step: PlannedStep) -> StepResult:
    """10-90 % transition duration from IEEE 181 state levels, in the output's direction."""
    items = _traces(ctx, step, step.args["traces"])
    rows, dt, n, sign = _pulse_rows(ctx, step, items)
    value, err = _mean_err(an.rise_time(rows, dt, n, polarity=sign))
    return StepResult(
        results={"traces": len(items), "series": [_pulse(step, "rise_time_ns", value, rows, dt, items)]},
        measurements=[measure(ctx, step, "rise_time_ns", value, uncertainty=err)],
    )


def analyse_leakage(ctx: RunContext, step: PlannedStep) -> StepResult:
    reading = _readings(ctx, step, step.args["reading"])[-1].value
    if not isinstance(reading, Mapping) or "current_A" not in reading:
        raise AnalysisInputError(f"{step.args['reading']!r} is not a bias reading (bias.read into)")
    current_nA = float(reading["current_A"]) * 1e9
    m = measure(ctx, step, "leakage_nA", current_nA, channel=None, output=None)
    return StepResult(results={"volts": reading.get("volts")}, measurements=[m])


def _pulse(step: PlannedStep, quantity: str, value: float, rows: np.ndarray, dt: float,
           items: list[Trace]) -> dict[str, Any]:
    t0 = items[0].t0_ns
    return pulse_series(channel_of(step), output_of(step), quantity, value, rows, dt, t0,
                        _n_baseline(step, items))


HANDLERS = {
    "analyse.transfer": analyse_transfer,
    "analyse.noise": analyse_noise,
    "analyse.baseline": analyse_baseline,
    "analyse.crosstalk": analyse_crosstalk,
    "analyse.s_curve": analyse_s_curve,
    "analyse.discriminator": analyse_discriminator,
    "analyse.peaking": analyse_peaking,
    "analyse.rise": analyse_rise,
    "analyse.leakage": analyse_leakage,
}


def failed_analysis(ctx: RunContext, step: PlannedStep, exc: Exception) -> StepResult:
    """An analysis that could not compute its figures: each produced quantity is NaN, verdict fail
    (a dead channel is a failed channel, not a crashed run), with the reason (``str(exc)``) on each
    measurement as well as in the step's ``error``."""
    a = step.args
    extra: dict[str, Any] = {}
    if step.kind == "analyse.crosstalk":
        extra = {"channel": int(a["victim_channel"]), "aggressor": int(a["aggressor_channel"])}
    if step.kind == "analyse.leakage":
        extra = {"channel": None, "output": None}
    ms = [
        replace(measure(ctx, step, q, float("nan"), reason=str(exc), **extra), verdict="fail")
        for q in KINDS[step.kind].produces
    ]
    return StepResult(results={"error": str(exc)}, measurements=ms)
