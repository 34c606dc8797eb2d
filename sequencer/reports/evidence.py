"""The series behind a certificate's plots, recomputed from what the store holds.

A run is read once into a :class:`RunSnapshot`; :func:`gather_evidence` then finds, for one channel:

* transfer curves: each ``analyse.transfer`` step names its traces (``settings.traces``) and sweep
  variable (``settings.x``); the traces of that name under the step's parent path, labelled with the
  channel and output, grouped by the sweep value, give the mean pulse height per amplitude
  (:func:`sequencer.analysis.pulse_height`, the step's ``method`` and ``n_baseline``); the line is
  the stored ``gain`` and ``offset_mV`` of that step;
* S-curves: each ``analyse.s_curve`` / ``analyse.discriminator`` step names its counts
  (``settings.counts``), the threshold variable (``settings.x``) and ``trials``; the ``counter.count``
  steps storing into that name under the same parent give counts per threshold; the fit drawn is the
  stored ``threshold_mV`` and ``threshold_sigma_mV``;
* pulse shapes: each ``analyse.peaking`` / ``analyse.rise`` step's traces (mean of those of the
  channel and output) with the stored time.

Sweep values come from the trace labels, the step settings or ``name=value`` segments of the step
path (``thr=12.5mV``).  Derived numbers are rounded to ``DERIVED_DIGITS`` significant digits so that
the canonical data does not depend on the last bit of a numpy version.
"""

from __future__ import annotations

import hashlib
import math
import re
from collections import defaultdict
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

DERIVED_DIGITS = 9
_VAR = re.compile(
    r"^(?P<name>[A-Za-z_][\w]*)=(?P<num>[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?)\s*(?P<unit>\w*)$"
)
_TO_CANONICAL = {"": 1.0, "mV": 1.0, "V": 1e3, "uV": 1e-3, "ns": 1.0, "us": 1e3, "ps": 1e-3}


@dataclass(frozen=True, kw_only=True)
class TransferCurve:
    output: str
    amplitudes_mV: tuple[float, ...]
    heights_mV: tuple[float, ...]
    gain: float | None
    offset_mV: float | None
    inl_pct: float | None


@dataclass(frozen=True, kw_only=True)
class SCurve:
    label: str
    thresholds_mV: tuple[float, ...]
    counts: tuple[int, ...]
    trials: int
    threshold_mV: float | None  # the stored fit (analyse.s_curve measurements)
    sigma_mV: float | None
    # fitted here for the plot of a discriminator scan, from the (hashed) counts
    fit_mu_mV: float | None = field(default=None, metadata={"hashed": False})
    fit_sigma_mV: float | None = field(default=None, metadata={"hashed": False})


@dataclass(frozen=True, kw_only=True)
class PulseShape:
    output: str
    quantity: str
    value: float | None
    dt_ns: float
    t0_ns: float
    n_traces: int
    trace_sha256: str
    samples_mV: tuple[float, ...] = field(default=(), metadata={"hashed": False}, repr=False)


#: The certificate "channel" of a run whose measurements all belong to the module as a whole (a
#: coincidence unit, a digitizer's converter): numbered ``CH00``.
MODULE_CHANNEL = 0


class RunSnapshot:
    """One run read from the store: record, measurements, completed steps (with their traces),
    safety events."""

    def __init__(self, store: Any, run_id: int) -> None:
        self.store = store
        self.run_id = run_id
        self.run = store.get_run(run_id)
        self.measurements = tuple(store.measurements(run_id=run_id))
        self.steps: Mapping[str, Any] = dict(store.completed_steps(run_id))
        self.safety_events = tuple(store.safety_events(run_id))
        self.caveats = tuple(store.caveats(run_id))
        self.limit_quantities = _limit_quantities(store.run_inputs(run_id))
        self.channels = sorted({int(m.channel) for m in self.measurements if m.channel is not None})
        if not self.channels and self.measurements:
            self.channels = [MODULE_CHANNEL]  # a module measured as a whole: one certificate
        self._traces = [t for path in sorted(self.steps) for t in self.steps[path].traces]

    def traces_under(self, prefix: str) -> list[Any]:
        """Traces captured by steps below ``prefix`` (every trace for "")."""
        if not prefix:
            return self._traces
        return [t for t in self._traces if t.path.startswith(prefix + "/")]


def _limit_quantities(inputs: Iterable[Any]) -> frozenset[str]:
    """Quantities of the stored limit set (none when the run kept no limit set, or it no longer reads)."""
    from sequencer.errors import ProcedureError
    from sequencer.procedure.limits import parse_limits_text

    found: set[str] = set()
    for given in inputs:
        if given.kind != "limits":
            continue
        try:
            found |= {lim.quantity for lim in parse_limits_text(given.text, given.name)}
        except ProcedureError:
            continue  # a text of an older limits format: the judged values still say what was limited
    return frozenset(found)


def snapshot_run(store: Any, run_id: int) -> RunSnapshot:
    return RunSnapshot(store, run_id)


def gather_evidence(
    snap: RunSnapshot, channel: int
) -> tuple[tuple[TransferCurve, ...], tuple[SCurve, ...], tuple[PulseShape, ...]]:
    transfer: list[TransferCurve] = []
    s_curves: list[SCurve] = []
    pulses: list[PulseShape] = []
    for path in sorted(snap.steps):
        step = snap.steps[path]
        mine = [m for m in step.measurements if m.channel == channel]
        if not mine:
            continue
        if step.kind == "analyse.transfer":
            transfer.extend(_transfer(snap, path, step, mine))
        elif step.kind in ("analyse.s_curve", "analyse.discriminator"):
            s_curves.extend(_s_curves(snap, path, step, channel, mine))
        elif step.kind in ("analyse.peaking", "analyse.rise"):
            pulses.extend(_pulses(snap, path, step, mine))
    return tuple(transfer), tuple(s_curves), tuple(pulses)


def _transfer(snap: RunSnapshot, path: str, step: Any, mine: list[Any]) -> Iterable[TransferCurve]:
    from sequencer.analysis import pretrigger_baseline, pulse_height

    settings = dict(step.settings or {})
    xvar = str(settings.get("x", "amp"))
    for output in sorted({m.output or "" for m in mine}):
        values = {m.quantity: m.value for m in mine if (m.output or "") == output}
        # Heights over the whole stack at once, exactly as the engine computed them (the template
        # method's default template is the mean of every trace of the step), then one mean per x.
        traces = [
            t for t in _matching(snap, path, settings.get("traces"), mine[0].channel, output)
            if _num(dict(t.labels or {}).get(xvar)) is not None
        ]
        amps, heights = [], []
        if traces:
            stack, dt_ns = _stack(traces)
            n_base = pretrigger_baseline(int(settings.get("n_baseline") or 0), traces[0].t0_s * 1e9, dt_ns)
            h = np.atleast_1d(pulse_height(stack, dt_ns, n_base, str(settings.get("method", "peak"))))
            xs = np.array([_num(dict(t.labels or {}).get(xvar)) for t in traces], dtype=float)
            for amp in sorted(set(xs.tolist())):
                amps.append(_round(amp))
                heights.append(_round(float(np.mean(h[xs == amp]))))
        yield TransferCurve(
            output=output,
            amplitudes_mV=tuple(amps),
            heights_mV=tuple(heights),
            gain=values.get("gain"),
            offset_mV=values.get("offset_mV"),
            inl_pct=values.get("inl_pct"),
        )


def _pulses(snap: RunSnapshot, path: str, step: Any, mine: list[Any]) -> Iterable[PulseShape]:
    settings = dict(step.settings or {})
    for m in mine:
        traces = _matching(snap, path, settings.get("traces"), m.channel, m.output or "")
        if not traces:
            continue
        stack, dt_ns = _stack(traces)
        digest = hashlib.sha256()
        for t in traces:
            digest.update(np.ascontiguousarray(t.samples, dtype="<f8").tobytes())
            digest.update(repr((float(t.dt_s), float(t.t0_s))).encode())
        mean = stack.mean(axis=0)
        yield PulseShape(
            output=m.output or "",
            quantity=m.quantity,
            value=m.value,
            dt_ns=_round(dt_ns),
            t0_ns=_round(float(traces[0].t0_s) * 1e9),
            n_traces=len(traces),
            trace_sha256=digest.hexdigest(),
            samples_mV=tuple(float(v) for v in mean),
        )


def _s_curves(
    snap: RunSnapshot, path: str, step: Any, channel: int, mine: list[Any]
) -> Iterable[SCurve]:
    settings = dict(step.settings or {})
    name, xvar = settings.get("counts"), str(settings.get("x", "thr"))
    trials = int(settings.get("trials", 0) or 0)
    amp_var = settings.get("amplitude")
    values = {m.quantity: m.value for m in mine}
    points = _counts(snap, _parent(path), name, channel, xvar, amp_var) or _counts(
        snap, "", name, channel, xvar, amp_var
    )
    by_amp: dict[float | None, dict[float, int]] = defaultdict(dict)
    for amp, thr, n in points:
        by_amp[amp][thr] = n
    single = step.kind == "analyse.s_curve"
    for amp in sorted(by_amp, key=lambda a: (a is None, a or 0.0)):
        thresholds = tuple(sorted(by_amp[amp]))
        counts = tuple(by_amp[amp][t] for t in thresholds)
        mu, sigma = (None, None) if single else _fit(thresholds, counts, trials)
        yield SCurve(
            label="S-curve" if amp is None else f"{amp_var} = {_round(amp):g} mV",
            thresholds_mV=thresholds,
            counts=counts,
            trials=trials,
            threshold_mV=values.get("threshold_mV") if single else None,
            sigma_mV=values.get("threshold_sigma_mV") if single else None,
            fit_mu_mV=mu,
            fit_sigma_mV=sigma,
        )


def _counts(
    snap: RunSnapshot, prefix: str, name: Any, channel: int, xvar: str, amp_var: Any
) -> list[tuple[float | None, float, int]]:
    """(amplitude, threshold, count) of the ``counter.count`` steps of ``channel`` reading into
    ``name`` under ``prefix``.  Threshold and amplitude: ``name=value`` segments of the counter
    step's path, else the last ``threshold.level`` of that channel / ``pulser.amplitude`` before it
    (the settings in force when it counted; steps are in the order they were recorded)."""
    found = []
    level: dict[int, float] = {}
    amplitude: float | None = None
    for cpath, cstep in snap.steps.items():
        cs = dict(cstep.settings or {})
        if cstep.kind == "threshold.level" and _num(cs.get("mV")) is not None:
            level[int(cs.get("channel", 0))] = float(cs["mV"])
        elif cstep.kind == "pulser.amplitude" and _num(cs.get("mV")) is not None:
            amplitude = float(cs["mV"])
        if cstep.kind != "counter.count" or cs.get("into") != name:
            continue
        if (prefix and not cpath.startswith(prefix + "/")) or int(cs.get("channel", -1)) != channel:
            continue
        variables = path_vars(cpath)
        thr = variables.get(xvar, level.get(channel))
        amp = variables.get(amp_var, amplitude) if amp_var else None
        n = _reading(cstep.results or {}, name)
        if thr is not None and n is not None:
            found.append((None if amp is None else _round(amp), _round(thr), n))
    return found


def _reading(results: Mapping[str, Any], name: Any) -> int | None:
    """The count a counter step stored: ``results.readings[name]`` (engine), else ``counts``."""
    readings = results.get("readings")
    value = readings.get(name) if isinstance(readings, Mapping) else None
    if value is None:
        value = results.get("counts")
    return None if value is None else int(value)


def _fit(
    thresholds: tuple[float, ...], counts: tuple[int, ...], trials: int
) -> tuple[float | None, float | None]:
    """μ, σ of one S-curve of a discriminator scan (sequencer.analysis.fit_s_curve), or Nones."""
    from sequencer.analysis import fit_s_curve

    if trials <= 0 or len(thresholds) < 3:
        return None, None
    try:
        fit = fit_s_curve(thresholds, counts, [trials] * len(counts))
    except ValueError:
        return None, None
    return _round(fit.mu), _round(fit.sigma)


def _matching(
    snap: RunSnapshot, path: str, name: Any, channel: int | None, output: str
) -> list[Any]:
    """Traces called ``name`` labelled with ``channel`` and ``output``: those under the analysis
    step's parent path, else those anywhere in the run (the engine selects by labels, not path)."""
    return _select(snap.traces_under(_parent(path)), name, channel, output) or _select(
        snap.traces_under(""), name, channel, output
    )


def _select(traces: list[Any], name: Any, channel: int | None, output: str) -> list[Any]:
    found = []
    for t in traces:
        labels = dict(t.labels or {})
        if name is not None and t.name != name:
            continue
        if "channel" in labels and channel is not None and int(labels["channel"]) != channel:
            continue
        if output and "output" in labels and str(labels["output"]) != output:
            continue
        found.append(t)
    return found


def _stack(traces: list[Any]) -> tuple[np.ndarray, float]:
    n = min(len(t.samples) for t in traces)
    stack = np.vstack([np.asarray(t.samples, dtype=np.float64)[:n] * 1e3 for t in traces])
    return stack, float(traces[0].dt_s) * 1e9


def path_vars(path: str) -> dict[str, float]:
    """``name=value[unit]`` segments of a step path, values in canonical units (mV, ns)."""
    found: dict[str, float] = {}
    for segment in path.split("/"):
        m = _VAR.match(segment)
        if m and m.group("unit") in _TO_CANONICAL:
            found[m.group("name")] = float(m.group("num")) * _TO_CANONICAL[m.group("unit")]
    return found


def _num(value: Any) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    if isinstance(value, int | float):
        return float(value) if math.isfinite(float(value)) else None
    parsed = path_vars(f"v={str(value).replace(' ', '')}")
    return parsed.get("v")


def _parent(path: str) -> str:
    return path.rsplit("/", 1)[0] if "/" in path else ""


def _round(value: float) -> float:
    return float(f"{float(value):.{DERIVED_DIGITS}g}")
