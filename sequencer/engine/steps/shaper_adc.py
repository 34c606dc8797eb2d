"""Handlers of the shaper-to-ADC analyses (``analyse.charge``, ``analyse.slow_adc``).

* ``analyse.charge``: the test pulse of amplitude V goes through a test capacitor C, so the injected
  charge is Q = C·V (1 pF × 1 mV = 1 fC); shaped pulse heights against Q give the charge gain
  (mV/fC, slope of the least-squares line) and its INL (% of the output span, IEEE 1241
  independently based line);
* ``analyse.slow_adc``: each full-rate capture of the unipolar shaped pulse is resampled as a slow ADC
  of period T would see it, at every sampling phase the capture allows, and the peak is
  reconstructed from those samples (fit of the known CR-RCⁿ shape, or a parabola); the error
  against the full-rate peak gives ``reconstruction_bias_pct`` and ``reconstruction_rms_pct``; the
  FWHM/T samples above half height is kept beside them.
"""

from __future__ import annotations

import numpy as np

from drivers.trace import Trace
from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import measure
from ..records import StepResult


class ShaperInputError(ValueError):
    """The run holds no usable shaped traces for a shaper-to-ADC step."""


def _traces(ctx: RunContext, step: PlannedStep) -> tuple[list[Trace], np.ndarray, float, int]:
    name = step.args["traces"]
    items = ctx.select_traces(name, step.labels)
    if not items:
        raise ShaperInputError(f"no traces called {name!r} in the scope {dict(step.labels)}")
    trace = items[0]
    try:
        nb = an.pretrigger_baseline(int(step.args.get("n_baseline") or 0), trace.t0_ns, trace.dt_ns)
    except ValueError as exc:
        raise ShaperInputError(f"traces {name!r}: {exc}") from None
    return items, np.vstack([i.mV for i in items]), trace.dt_ns, nb


def analyse_charge(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items, rows, dt, nb = _traces(ctx, step)
    try:
        volts_mV = np.array([float(i.labels[a["x"]]) for i in items])
    except KeyError:
        raise ShaperInputError(f"sweep variable {a['x']!r} is not among the labels") from None
    charge_fC = float(a["capacitance"]) * volts_mV  # pF × mV = fC
    heights = np.atleast_1d(an.pulse_height(rows, dt, nb))
    if not np.isfinite(heights).all():
        raise ShaperInputError("a shaped pulse could not be measured (no pulse above the noise)")
    line = an.fit_line(charge_fC, heights)
    return StepResult(
        results={"charge_fC": charge_fC.tolist(), "height_mV": heights.tolist()},
        measurements=[
            measure(ctx, step, "charge_gain_mV_per_fC", line.slope, uncertainty=line.slope_err),
            measure(ctx, step, "charge_inl_pct", an.inl_percent(charge_fC, heights)),
        ],
    )


def analyse_slow_adc(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items, rows, dt, nb = _traces(ctx, step)
    period = float(a["period"])
    stride = round(period / dt)
    if stride < 2 or abs(stride * dt - period) > 1e-6 * period:
        raise ShaperInputError(
            f"period {period:g} ns is not a whole multiple (>= 2) of the {dt:g} ns sample interval"
        )
    order, tau, method = int(a["order"]), float(a["tau"]), str(a.get("method") or "shape")
    t = items[0].t0_ns + dt * np.arange(rows.shape[1])
    errors = []
    for row in rows:
        y = row - row[:nb].mean()
        truth = float(an.pulse_height(y, dt, nb))
        for phase in range(stride):
            r = an.reconstruct_amplitude(
                t[phase::stride], y[phase::stride], order=order, tau_ns=tau, method=method
            )
            errors.append(r.amplitude_mV / truth - 1.0)
    err = 100.0 * np.array(errors)
    return StepResult(
        results={
            "reconstructions": int(err.size),
            "method": method,
            "samples_above_half": an.samples_above_half(order, tau, period),
        },
        measurements=[
            measure(
                ctx,
                step,
                "reconstruction_bias_pct",
                float(err.mean()),
                uncertainty=float(err.std(ddof=1) / np.sqrt(err.size)),
            ),
            measure(ctx, step, "reconstruction_rms_pct", float(err.std(ddof=1))),
        ],
    )


HANDLERS = {"analyse.charge": analyse_charge, "analyse.slow_adc": analyse_slow_adc}
