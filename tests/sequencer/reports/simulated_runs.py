"""Invented qualification runs (lab "Nordring", boards NR-PA8-xxxx) recorded through the store's
public API: ``Store.create_run`` then the runner's events (``sequencer.events``) fed to
``Store.handle``, the way the engine records a run.

The figures stored are computed from the generated traces and counts with ``sequencer.analysis``,
as the engine's analysis steps do, and the series kept with them by the engine's own helpers; limits are those of an invented limit set.  Paths follow the
plan's ``group/chN/output/var=value/step`` form.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from scipy import stats

from sequencer import analysis as an
from sequencer.engine.steps.scope import RAILS_META
from sequencer.engine.steps.series import pulse_series, s_curve_series, transfer_series
from sequencer.events import (
    InstrumentInfo,
    Measurement,
    MeasurementMade,
    RunFinished,
    RunInfo,
    SafetyEvent,
    StepFinished,
    StepStarted,
    TraceCaptured,
)
from sequencer.inputs import RunInput

T0 = datetime(2025, 3, 3, 8, 0, 0, tzinfo=UTC)
PROCEDURE_TEXT = "procedure: pa8-qualify\nversion: '2.0'\nsteps: []\n"
AMPLITUDES_MV = (10.0, 25.0, 50.0, 100.0, 150.0, 200.0)
THRESHOLDS_MV = tuple(float(t) for t in np.arange(2.0, 16.1, 1.0))
TRIALS = 200
N_SAMPLES = 400
DT_S = 1e-9
N_BASELINE = 60
CAPTURE_RAILS_MV = "-1000.0,1000.0"  # the scope input range the invented captures were taken with
GAINS = {"x1": 1.0, "x5": 5.0}
LIMITS: dict[tuple[str, str | None], tuple[float | None, float | None]] = {
    ("gain", "x1"): (0.9, 1.1),
    ("gain", "x5"): (4.5, 5.5),
    ("offset_mV", None): (-5.0, 5.0),
    ("inl_pct", None): (None, 1.0),
    ("noise_in_mV", None): (None, 1.0),
    ("crosstalk_pct", None): (None, 2.0),
    ("threshold_mV", None): (5.0, 12.0),
    ("threshold_sigma_mV", None): (None, 3.0),
    ("peaking_time_ns", None): (150.0, 250.0),
    ("leakage_nA", None): (None, 20.0),
}
UNITS = {
    "gain": "V/V",
    "offset_mV": "mV",
    "inl_pct": "%",
    "noise_in_mV": "mV",
    "crosstalk_pct": "%",
    "threshold_mV": "mV",
    "threshold_sigma_mV": "mV",
    "peaking_time_ns": "ns",
    "leakage_nA": "nA",
}


@dataclass(frozen=True, kw_only=True)
class RunSpec:
    """What to record; ``gain_scale`` multiplies a channel's true gain (to make a bad channel)."""

    board: str = "NR-PA8-0001"
    board_type: str = "PA8"
    batch: str = "NR-B07"
    channels: int = 8
    seed: int = 7
    started_at: datetime = T0
    operator: str = "i.lindqvist"
    gain_scale: Mapping[int, float] = field(default_factory=dict)
    threshold_mV: float = 8.0
    full: bool = True  # False: only gain of each channel and output (quick weekly repeats)
    status: str = "completed"
    distant_control: bool = False  # crosstalk also into a far channel (the floor, ~0.02 %)
    #: A supply whose interlock cannot be read: the bench's declaration, recorded with the run's
    #: interlock check and acknowledgement as the bias guard records them ('' = a readable one).
    hardware_interlock: str = ""
    #: Texts the run used (``sequencer.inputs``) and caveats every certificate prints.
    inputs: tuple[RunInput, ...] = ()
    caveats: tuple[str, ...] = ()


def run_info(spec: RunSpec) -> RunInfo:
    return RunInfo(
        procedure="pa8-qualify",
        procedure_version="2.0",
        procedure_text=PROCEDURE_TEXT,
        procedure_sha256=hashlib.sha256(PROCEDURE_TEXT.encode()).hexdigest(),
        procedure_path="procedures/pa8-qualify.yaml",
        bench="bench-2",
        board=spec.board,
        board_type=spec.board_type,
        operator=spec.operator,
        software_version="0.1.0",
        instruments=(
            InstrumentInfo(
                role="pulser",
                address="TCPIP0::127.0.0.1::5025::SOCKET",
                maker="NORDRING",
                model="PG-2",
                serial="NRP-0007",
                firmware="1.4",
                calibration_due="2026-01-31",
                calibrated="2025-01-31",
            ),
            InstrumentInfo(
                role="scope",
                address="TCPIP0::127.0.0.1::5026::SOCKET",
                maker="NORDRING",
                model="DSO-4",
                serial="NRS-0042",
                firmware="2.1",
                calibration_due="2026-06-30",
                calibrated="2025-06-30",
            ),
            InstrumentInfo(
                role="bias",
                address="TCPIP0::127.0.0.1::5029::SOCKET",
                maker="NORDRING",
                model="HV-60",
                serial="NRH-0003",
                firmware="3.0",
                calibration_due="2025-12-31",
                calibrated="2024-12-31",
            ),
        ),
        batch=spec.batch,
        inputs=spec.inputs,
        caveats=spec.caveats,
    )


def judged(quantity: str, value: float, *, output: str | None = None, **kw: Any) -> Measurement:
    low, high = LIMITS.get((quantity, output), LIMITS.get((quantity, None), (None, None)))
    ok = (low is None or value >= low) and (high is None or value <= high)
    return Measurement(
        quantity=quantity,
        value=float(value),
        unit=UNITS[quantity],
        output=output,
        low=low,
        high=high,
        verdict="pass" if ok else "fail",
        **kw,
    )


class _Recorder:
    def __init__(self, store: Any, run_id: int, start: datetime) -> None:
        self.store, self.run_id, self.clock, self.index = store, run_id, start, 0

    def step(
        self,
        path: str,
        kind: str,
        *,
        settings: Mapping[str, Any] | None = None,
        traces: tuple[TraceCaptured, ...] = (),
        measurements: tuple[Measurement, ...] = (),
        results: Mapping[str, Any] | None = None,
    ) -> None:
        started = self.clock
        self.clock += timedelta(milliseconds=20)
        self.store.handle(
            StepStarted(
                run_id=self.run_id, path=path, kind=kind, index=self.index, total=0, at=started
            )
        )
        for t in traces:
            self.store.handle(t)
        for m in measurements:
            self.store.handle(MeasurementMade(run_id=self.run_id, path=path, measurement=m))
        self.store.handle(
            StepFinished(
                run_id=self.run_id,
                path=path,
                kind=kind,
                status="completed",
                started_at=started,
                finished_at=self.clock,
                settings=dict(settings or {}),
                results=dict(results or {}),
            )
        )
        self.index += 1

    def safety(self, path: str, kind: str, **detail: Any) -> None:
        self.store.handle(
            SafetyEvent(run_id=self.run_id, path=path, kind=kind, at=self.clock, detail=detail)
        )


def pulse_shape(
    n: int = N_SAMPLES, start: int = 80, rise: float = 4.0, decay: float = 40.0
) -> np.ndarray:
    t = np.arange(n) - start
    p = np.where(t > 0, (1 - np.exp(-t / rise)) * np.exp(-t / decay), 0.0)
    return p / p.max()


def shaped_pulse(
    n: int = N_SAMPLES, start: int = 80, order: int = 4, tau: float = 50.0
) -> np.ndarray:
    """Unipolar CR-RC^n step response x^n e^-x / n!, peak at n·τ (REFERENCES.md, Spieler 2005)."""
    x = np.clip((np.arange(n) - start) / tau, 0.0, None)
    v = x**order * np.exp(-x)
    return v / v.max()


def record_run(
    store: Any,
    spec: RunSpec,
    tweak: Callable[[str, int, str | None, float], float] | None = None,
    *,
    instruments: tuple[InstrumentInfo, ...] | None = None,
) -> int:
    """Record a run of ``spec``; ``tweak(quantity, channel, output, value)`` may alter a figure
    before it is judged (drift injection); ``instruments`` replace the bench's.  Returns the run id."""
    rng = np.random.default_rng(spec.seed)
    info = run_info(spec)
    if instruments is not None:
        info = replace(info, instruments=instruments)
    run_id = store.create_run(info, started_at=spec.started_at)
    rec = _Recorder(store, run_id, spec.started_at)
    fix = tweak or (lambda q, c, o, v: v)
    if spec.full:
        if spec.hardware_interlock:
            wired = {"hardware": spec.hardware_interlock}
            rec.safety("bias/ramp", "interlock", closed=None, **wired)
            rec.safety("bias/ramp", "acknowledgement", operator=spec.operator, mode="interactive",
                       unattended=False, max_volts=42.0, at=rec.clock.isoformat(), **wired)  # fmt: skip
        rec.safety("bias/ramp", "ramp_start", volts=0.0, target_V=42.0, rate_V_per_s=5.0)
        rec.step("bias/ramp", "bias.ramp", settings={"volts": 42.0, "rate": 5.0})
        rec.safety("bias/ramp", "ramp_end", volts=42.0)
        leak = fix("leakage_nA", 0, None, 8.4 + rng.normal(0, 0.05))
        rec.step(
            "bias/read",
            "bias.read",
            settings={"into": "bias"},
            results={"readings": {"bias": {"volts": 42.0, "amps": leak * 1e-9}}},
        )
        rec.step(
            "bias/leakage",
            "analyse.leakage",
            settings={"reading": "bias"},
            measurements=(judged("leakage_nA", leak),),
        )
    shape = pulse_shape()
    for ch in range(1, spec.channels + 1):
        true = 1.0 + rng.normal(0, 0.01)
        for output, nominal in GAINS.items():
            _transfer(
                rec, rng, ch, output, nominal * true * spec.gain_scale.get(ch, 1.0), shape, fix
            )
        if spec.full:
            _shape(rec, rng, ch)
            _s_curve(rec, rng, ch, spec.threshold_mV + rng.normal(0, 0.2), fix)
            _crosstalk(rec, rng, ch, spec.channels, spec.distant_control)
    if spec.full:
        rec.safety("cleanup/bias", "ramp_start", volts=42.0, target_V=0.0, rate_V_per_s=5.0)
        rec.safety("cleanup/bias", "safe_state", volts=0.0, output="off")
    ended = rec.clock + timedelta(seconds=1)
    store.handle(
        RunFinished(
            run_id=run_id,
            status=spec.status,
            at=ended,
            reason="" if spec.status == "completed" else "stopped by operator",
        )
    )
    return run_id


def _transfer(
    rec: _Recorder,
    rng: np.random.Generator,
    ch: int,
    output: str,
    gain: float,
    shape: np.ndarray,
    fix: Callable,
) -> None:
    heights, amps = [], []
    for amp in AMPLITUDES_MV:
        samples_mV = 0.3 + gain * amp * shape + rng.normal(0, 0.3 * gain, shape.size)
        path = f"gain/ch{ch}/{output}/amp={amp:g}mV/capture"
        trace = TraceCaptured(
            run_id=rec.run_id,
            path=path,
            name="pulse",
            samples=samples_mV / 1e3,
            dt_s=DT_S,
            t0_s=-80e-9,
            source="CHAN1",
            labels={"channel": ch, "output": output, "amp": amp},
            meta={RAILS_META: CAPTURE_RAILS_MV},  # as scope.capture records the input's range
        )
        rec.step(
            path, "scope.capture", settings={"inputs": [1], "into": ["pulse"]}, traces=(trace,)
        )
        heights.append(float(an.pulse_height(samples_mV, 1.0, N_BASELINE)))
        amps.append(amp)
    fit = an.transfer_curve(amps, heights)
    noise = 0.3 + rng.normal(0, 0.01)
    series = transfer_series(ch, output, np.array(amps), np.array(heights), fit)  # as the engine
    rec.step(
        f"gain/ch{ch}/{output}/transfer",
        "analyse.transfer",
        settings={"traces": "pulse", "x": "amp", "n_baseline": N_BASELINE, "method": "peak"},
        results={"points": len(amps), "series": [series]},
        measurements=(
            judged(
                "gain",
                fix("gain", ch, output, fit.gain),
                output=output,
                channel=ch,
                uncertainty=fit.gain_err,
            ),
            judged(
                "offset_mV", fit.offset_mV, output=output, channel=ch, uncertainty=fit.offset_err
            ),
            judged("inl_pct", fit.inl_pct, output=output, channel=ch),
            judged("noise_in_mV", noise, output=output, channel=ch),
        ),
    )


def _shape(rec: _Recorder, rng: np.random.Generator, ch: int) -> None:
    path = f"shape/ch{ch}/capture"
    samples_mV = 50.0 * shaped_pulse() + rng.normal(0, 0.2, N_SAMPLES)
    trace = TraceCaptured(
        run_id=rec.run_id,
        path=path,
        name="shaped",
        samples=samples_mV / 1e3,
        dt_s=DT_S,
        t0_s=-80e-9,
        labels={"channel": ch, "output": "shaped"},
        meta={RAILS_META: CAPTURE_RAILS_MV},
    )
    rec.step(path, "scope.capture", settings={"inputs": [2], "into": ["shaped"]}, traces=(trace,))
    peaking = float(an.peaking_time(samples_mV, 1.0, 80.0))
    series = pulse_series(ch, "shaped", "peaking_time_ns", peaking, samples_mV[None, :], 1.0, -80.0, 80)
    rec.step(
        f"shape/ch{ch}/peaking",
        "analyse.peaking",
        settings={"traces": "shaped"},
        results={"series": [series]},
        measurements=(judged("peaking_time_ns", peaking, output="shaped", channel=ch),),
    )


def _s_curve(rec: _Recorder, rng: np.random.Generator, ch: int, mu: float, fix: Callable) -> None:
    sigma = 1.2
    counts = []
    for thr in THRESHOLDS_MV:
        rec.step(
            f"scurve/ch{ch}/thr={thr:g}mV/level",
            "threshold.level",
            settings={"channel": ch, "mV": thr},
        )
        # efficiency ε = norm.sf(thr, μ, σ) (REFERENCES.md, threshold scans)
        k = int(rng.binomial(TRIALS, stats.norm.sf(thr, mu, sigma)))
        counts.append(k)
        rec.step(
            f"scurve/ch{ch}/thr={thr:g}mV/count",
            "counter.count",
            settings={"channel": ch, "into": "counts"},
            results={"readings": {"counts": k}},
        )
    fit = an.fit_s_curve(THRESHOLDS_MV, counts, TRIALS)
    series = s_curve_series(ch, "S-curve", THRESHOLDS_MV, counts, TRIALS, fit)
    rec.step(
        f"scurve/ch{ch}/fit",
        "analyse.s_curve",
        settings={"counts": "counts", "x": "thr", "trials": TRIALS},
        results={"series": [series]},
        measurements=(
            judged(
                "threshold_mV",
                fix("threshold_mV", ch, "x1", fit.mu),
                output="x1",
                channel=ch,
                uncertainty=fit.mu_err,
            ),
            judged(
                "threshold_sigma_mV", fit.sigma, output="x1", channel=ch, uncertainty=fit.sigma_err
            ),
        ),
    )


def _crosstalk(
    rec: _Recorder, rng: np.random.Generator, ch: int, channels: int, distant: bool = False
) -> None:
    rows = tuple(
        judged(
            "crosstalk_pct", 1.0 + rng.normal(0, 0.05), output="x1", channel=victim, aggressor=ch
        )
        for victim in (ch - 1, ch + 1)
        if 1 <= victim <= channels
    )
    if distant:  # half the board away, as the shipped crosstalk procedure's control channel
        far = (ch - 1 + channels // 2) % channels + 1
        rows += (
            judged(
                "crosstalk_pct", 0.02 + rng.normal(0, 0.01), output="x1", channel=far, aggressor=ch
            ),
        )
    rec.step(
        f"crosstalk/ch{ch}/analyse",
        "analyse.crosstalk",
        settings={"aggressor": "agg", "victim": "vic", "aggressor_channel": ch},
        measurements=rows,
    )
