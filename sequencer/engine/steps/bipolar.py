"""Handler of ``analyse.zero_crossing``: the zero crossing of a bipolar shaped pulse over an
amplitude sweep, judged as ``zero_crossing_ns`` and ``zero_crossing_walk_ns``.

A bipolar (CR²-RCⁿ) pulse crosses its baseline at (n+1)·τ after its onset whatever its amplitude
(REFERENCES.md, Spieler 2005 ch. 4): timing on the crossing does not walk, which is why bipolar
shaping is used for timing on the slow branch.  ``zero_crossing_ns`` is the mean time from the
fitted pulse onset to the crossing (as the peaking time counts from the onset, never the trigger);
``zero_crossing_walk_ns`` is the spread (max − min) over the amplitudes of the mean crossing time
after the trigger, the instant every capture shares.  A pulse that does not cross back (a unipolar
shaper, a record cut short) is refused with the reason, never given a time.
"""

from __future__ import annotations

import numpy as np

from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import measure, output_of
from ..records import StepResult
from .refusing import AnalysisRefused, clip_reasons, merge, polarity, refuse_any


class ZeroCrossingInputError(ValueError):
    """The run holds no usable shaped traces for the zero-crossing step."""


def analyse_zero_crossing(ctx: RunContext, step: PlannedStep) -> StepResult:
    a = step.args
    items = ctx.select_traces(a["traces"], step.labels)
    if not items:
        raise ZeroCrossingInputError(f"no traces called {a['traces']!r} in the scope {dict(step.labels)}")
    trace = items[0]
    if any(abs(i.dt_ns - trace.dt_ns) > 1e-9 * trace.dt_ns for i in items):
        raise ZeroCrossingInputError("the traces of one zero-crossing step have different time bases")
    try:
        amps = np.array([float(i.labels[a["x"]]) for i in items])
        n = an.pretrigger_baseline(int(a.get("n_baseline") or 0), trace.t0_ns, trace.dt_ns)
    except KeyError:
        raise ZeroCrossingInputError(f"sweep variable {a['x']!r} is not among the labels") from None
    rows, dt = np.vstack([i.mV for i in items]), trace.dt_ns
    sign = polarity(ctx, output_of(step))
    refuse_any(merge(clip_reasons(items, rows), an.pulse_reasons(rows, n, polarity=sign)))
    onsets = np.atleast_1d(an.pulse_onset(rows, dt, n, polarity=sign))
    if not np.all(np.isfinite(onsets)):
        raise AnalysisRefused("the pulse onset could not be fitted")
    _refuse_without_lobe(sign * rows, n)
    try:
        from_onset = np.atleast_1d(
            an.zero_crossing_time(rows, dt, onsets, n_baseline=n, polarity=sign)
        )
        after_trigger = trace.t0_ns + np.atleast_1d(
            an.zero_crossing_time(rows, dt, 0.0, n_baseline=n, polarity=sign)
        )
    except ValueError as exc:
        raise AnalysisRefused(f"no zero crossing (a record cut short?): {exc}") from None
    levels = np.unique(amps)
    per_amp = np.array([after_trigger[amps == v].mean() for v in levels])
    err = float(from_onset.std(ddof=1) / np.sqrt(from_onset.size)) if from_onset.size > 1 else None
    return StepResult(
        results={
            "amplitudes_mV": levels.tolist(),
            "zero_crossing_after_trigger_ns": per_amp.tolist(),
            "onset_after_trigger_ns": float(np.mean(onsets)) + trace.t0_ns,
        },
        measurements=[
            measure(ctx, step, "zero_crossing_ns", float(from_onset.mean()), uncertainty=err),
            measure(ctx, step, "zero_crossing_walk_ns", float(per_amp.max() - per_amp.min())),
        ],
    )


def _refuse_without_lobe(signed: np.ndarray, n: int) -> None:
    """Refuse rows with no second lobe: after the peak, the pulse must swing past its baseline by
    more than 5 σ of the baseline noise and 5 % of its peak (a CR²-RCⁿ lobe is 34-54 % of it,
    REFERENCES.md); otherwise the "crossing" is noise on a unipolar tail."""
    base = signed[:, :n].mean(axis=1)
    sigma = signed[:, :n].std(axis=1, ddof=1)
    y = signed - base[:, None]
    peak_at = np.argmax(y, axis=1)
    for row, k, s in zip(y, peak_at, sigma, strict=True):
        depth, need = -float(row[k:].min()), max(5.0 * float(s), 0.05 * float(row[k]))
        if depth <= need:
            raise AnalysisRefused(
                f"no zero crossing: no second lobe after the peak (deepest {depth:.3g} mV past "
                f"the baseline, needs more than {need:.3g} mV); a unipolar shaper?"
            )


HANDLERS = {"analyse.zero_crossing": analyse_zero_crossing}
