"""Handlers of the digitizer analyses (``analyse.sine``, ``analyse.code_density``,
``analyse.bandwidth``): the traces of a digitizer under test, captured while the pulser runs in sine
mode, judged as IEEE 1241 figures.

The code-density test needs the converter's own codes: they are recovered from the calibrated
samples as ``(mV − offset)/(range/2^bits) + 2^(bits−1)``, and refused when the samples are not on
that grid (averaged captures, a wrong ``bits`` or ``range``) instead of being rounded into codes.
"""

from __future__ import annotations

import math

import numpy as np

from drivers.trace import Trace
from sequencer import analysis as an
from sequencer.procedure.plan_model import PlannedStep

from ..context import RunContext
from ..judge import measure
from ..records import StepResult

#: Largest distance (in LSB) of a sample from the converter's code grid that still counts as a code.
GRID_TOLERANCE_LSB = 0.01


class DigitizerInputError(ValueError):
    """The run holds no usable digitizer records for an analysis step."""


def _records(ctx: RunContext, step: PlannedStep) -> list[Trace]:
    name = step.args["traces"]
    items = ctx.select_traces(name, step.labels)
    if not items:
        raise DigitizerInputError(f"no traces called {name!r} in the scope {dict(step.labels)}")
    return items


def analyse_sine(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Four-parameter fit of every record; SINAD and ENOB are the mean over records."""
    items = _records(ctx, step)
    start = step.args.get("frequency")
    fits = [
        an.fit_sine_4(item.mV, 1.0 / item.dt_s, None if start is None else float(start))
        for item in items
    ]
    not_converged = sum(1 for f in fits if not f.converged)
    if not_converged:
        raise DigitizerInputError(f"the sine fit did not converge on {not_converged} record(s)")
    sinad = np.array([f.sinad_db for f in fits])
    enob = np.array([f.enob for f in fits])
    n = len(fits)
    err = (lambda v: float(v.std(ddof=1) / math.sqrt(n))) if n > 1 else (lambda v: None)
    return StepResult(
        results={
            "records": n,
            "frequency_hz": [f.frequency_hz for f in fits],
            "amplitude_mV": [f.amplitude for f in fits],
            "offset_mV": [f.offset for f in fits],
            "residual_rms_mV": [f.residual_rms for f in fits],
        },
        measurements=[
            measure(
                ctx, step, "sinad_db", float(sinad.mean()), uncertainty=err(sinad), output=None
            ),
            measure(ctx, step, "enob_bits", float(enob.mean()), uncertainty=err(enob), output=None),
        ],
    )


def converter_codes(mV: np.ndarray, *, bits: int, range_mV: float, offset_mV: float) -> np.ndarray:
    """The converter's codes 0 .. 2^bits − 1 behind calibrated samples (refused off the grid)."""
    lsb = range_mV / (1 << bits)
    x = (np.asarray(mV, dtype=float) - offset_mV) / lsb + (1 << (bits - 1))
    codes = np.rint(x)
    off = float(np.max(np.abs(x - codes))) if x.size else 0.0
    if off > GRID_TOLERANCE_LSB:
        raise DigitizerInputError(
            f"samples lie up to {off:.3g} LSB off the code grid of a {bits}-bit converter at "
            f"{range_mV:g} mV full scale: not raw codes (averaged, or another bits/range)"
        )
    return np.clip(codes, 0, (1 << bits) - 1).astype(np.int64)


def analyse_code_density(ctx: RunContext, step: PlannedStep) -> StepResult:
    """One histogram over every record of the step's scope."""
    a = step.args
    bits = int(a["bits"])
    items = _records(ctx, step)
    codes = np.concatenate(
        [
            converter_codes(
                i.mV,
                bits=bits,
                range_mV=float(a["range"]),
                offset_mV=float(a.get("offset") or 0.0),
            )
            for i in items
        ]
    )
    result = an.code_density(codes, bits)
    return StepResult(
        results={
            "samples": int(codes.size),
            "first_code": result.first_code,
            "missing": list(result.missing_codes),
            "series": {"dnl_lsb": result.dnl_lsb.tolist(), "inl_lsb": result.inl_lsb.tolist()},
        },
        measurements=[
            measure(ctx, step, "dnl_max_lsb", result.dnl_max_lsb, output=None),
            measure(ctx, step, "inl_max_lsb", result.inl_max_lsb, output=None),
            measure(ctx, step, "missing_codes", float(len(result.missing_codes)), output=None),
        ],
    )


def analyse_bandwidth(ctx: RunContext, step: PlannedStep) -> StepResult:
    """Amplitude of each record (four-parameter fit started at the sine's alias) against its
    frequency; the −3 dB point of the mean amplitude per frequency (``an.effective_bandwidth``)."""
    items = _records(ctx, step)
    x = step.args["x"]
    amplitudes: dict[float, list[float]] = {}
    for item in items:
        if x not in item.labels:
            raise DigitizerInputError(f"sweep variable {x!r} is not among the labels")
        f = float(item.labels[x])
        fs = 1.0 / item.dt_s
        fit = an.fit_sine_4(item.mV, fs, an.aliased_frequency(f, fs))
        if not fit.converged:
            raise DigitizerInputError(f"the sine fit did not converge at {f / 1e6:g} MHz")
        amplitudes.setdefault(f, []).append(fit.amplitude)
    freqs = sorted(amplitudes)
    result = an.effective_bandwidth(freqs, [float(np.mean(amplitudes[f])) for f in freqs])
    results: dict[str, object] = {
        "series": {"frequency_hz": result.frequencies_hz.tolist(), "gain_db": result.gain_db.tolist()}
    }
    if result.reason:  # NaN, judged fail, the reason stored with the step
        results["error"] = result.reason
    return StepResult(
        results=results,
        measurements=[
            measure(
                ctx,
                step,
                "bandwidth_mhz",
                result.frequency_3db_hz / 1e6,
                output=None,
                reason=result.reason,
            )
        ],
    )


HANDLERS = {
    "analyse.sine": analyse_sine,
    "analyse.code_density": analyse_code_density,
    "analyse.bandwidth": analyse_bandwidth,
}
