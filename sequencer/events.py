"""The runner's events: what happened during a run, as plain frozen records.

The engine emits them; the store, the progress display and the log subscribe (wired in ``cli.py``).
This module is a leaf (numpy only as a type, so that ``verify`` starts without it) so that both ``sequencer.engine`` and ``sequencer.store`` may import
it without importing each other.

Order within a run::

    RunStarted
      (StepStarted, TraceCaptured*, MeasurementMade*, SafetyEvent*, StepFinished)*
    RunFinished

The store writes each step's traces and measurements in one transaction when ``StepFinished`` arrives
with status ``completed``; ``SafetyEvent`` is written at once (it must survive an abort mid-step).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import TYPE_CHECKING, Any, Literal

from sequencer.inputs import RunInput
from sequencer.records import Measurement as Measurement  # re-exported: the one record
from sequencer.records import Verdict as Verdict

if TYPE_CHECKING:
    import numpy as np

StepStatus = Literal["completed", "failed", "skipped", "replayed"]
RunStatus = Literal["running", "completed", "aborted", "interrupted"]


@dataclass(frozen=True)
class InstrumentInfo:
    """Identity of one instrument of the bench, as read with ``*IDN?``."""

    role: str
    address: str
    maker: str = ""
    model: str = ""
    serial: str = ""
    firmware: str = ""
    calibration_due: str = ""   # ISO date or ""
    calibrated: str = ""        # ISO date of the last calibration, or ""


@dataclass(frozen=True)
class RunInfo:
    """Provenance of a run, known before its first step."""

    procedure: str
    procedure_version: str
    procedure_text: str
    procedure_sha256: str
    procedure_path: str
    bench: str
    board: str
    board_type: str
    operator: str
    software_version: str
    instruments: tuple[InstrumentInfo, ...] = ()
    parameters: Mapping[str, Any] = field(default_factory=dict)
    bench_text: str = ""
    inputs: tuple[RunInput, ...] = ()   # every text the run used (sequencer.inputs), stored with it
    caveats: tuple[str, ...] = ()       # printed on every certificate of the run (changed text, overrides)
    batch: str = ""
    repeat_of: int | None = None


@dataclass(frozen=True)
class RunStarted:
    run_id: int
    info: RunInfo
    at: datetime


@dataclass(frozen=True)
class StepStarted:
    run_id: int
    path: str
    kind: str
    index: int          # position in the plan, 0-based
    total: int          # number of steps in the plan
    at: datetime


@dataclass(frozen=True)
class TraceCaptured:
    """A captured waveform. ``samples`` in volts (1-D); time of sample i = t0_s + i*dt_s."""

    run_id: int
    path: str
    name: str
    samples: np.ndarray
    dt_s: float
    t0_s: float
    source: str = ""
    averages: int = 1
    labels: Mapping[str, Any] = field(default_factory=dict)   # channel, output, sweep values...
    meta: Mapping[str, str] = field(default_factory=dict)  # e.g. the input's rails (clipping)


@dataclass(frozen=True)
class MeasurementMade:
    run_id: int
    path: str
    measurement: Measurement


@dataclass(frozen=True)
class SafetyEvent:
    """Bias/HV events: ramp_start, ramp_end, setpoint, reading, interlock, acknowledgement, safe_state,
    unsafe. ``detail`` holds numbers and strings (volts, amps, operator, state)."""

    run_id: int
    path: str
    kind: str
    at: datetime
    detail: Mapping[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StepFinished:
    """A step ended. ``results`` are the JSON-able readings a step produced (replayed on resume);
    ``settings`` the resolved parameters it applied."""

    run_id: int
    path: str
    kind: str
    status: StepStatus
    started_at: datetime
    finished_at: datetime
    settings: Mapping[str, Any] = field(default_factory=dict)
    results: Mapping[str, Any] = field(default_factory=dict)
    error: str = ""
    labels: Mapping[str, Any] = field(default_factory=dict)   # the plan's labels: channel, output, sweep values


@dataclass(frozen=True)
class RunFinished:
    run_id: int
    status: RunStatus
    at: datetime
    reason: str = ""


Event = RunStarted | StepStarted | TraceCaptured | MeasurementMade | SafetyEvent | StepFinished | RunFinished
Subscriber = Callable[[Event], None]
