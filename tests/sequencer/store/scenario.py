"""An invented qualification run (lab "Nordring", boards NR-PA8-xxxx) as the runner's events.

Used by the tests and by ``writer_proc.py`` (which runs in its own process).
"""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta

import numpy as np

from sequencer.events import (
    Event,
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

PROCEDURE_TEXT = """\
procedure: pa8-gain
version: "1.2"
steps:
  - bias: {volts: 42.0, ramp_V_per_s: 5}
  - scan: {output: [x1, x5], amplitude_mV: [10, 50, 100, 200]}
"""
BENCH_TEXT = "bench: bench-2\ninstruments:\n  scope: {address: 'TCPIP0::127.0.0.1::5026::SOCKET'}\n"
T0 = datetime(2025, 3, 4, 9, 30, 0, 250000, tzinfo=UTC)


def run_info(
    board: str = "NR-PA8-0001", *, procedure: str = "pa8-gain", batch: str = "NR-B07"
) -> RunInfo:
    return RunInfo(
        procedure=procedure,
        procedure_version="1.2",
        procedure_text=PROCEDURE_TEXT,
        procedure_sha256=hashlib.sha256(PROCEDURE_TEXT.encode()).hexdigest(),
        procedure_path="procedures/pa8-gain.yaml",
        bench="bench-2",
        board=board,
        board_type="PA8",
        operator="i.lindqvist",
        software_version="0.1.0",
        instruments=(
            InstrumentInfo(
                role="scope",
                address="TCPIP0::127.0.0.1::5026::SOCKET",
                maker="NORDRING",
                model="DSO-4",
                serial="NRS-0042",
                firmware="2.1",
                calibration_due="2027-06-30",
            ),
            InstrumentInfo(
                role="pulser", address="TCPIP0::127.0.0.1::5025::SOCKET", serial="NRP-0007"
            ),
        ),
        parameters={"amplitudes_mV": [10, 50, 100, 200], "bias_V": 42.0},
        bench_text=BENCH_TEXT,
        batch=batch,
    )


def step_events(
    run_id: int,
    path: str,
    *,
    index: int = 0,
    n_measurements: int = 3,
    n_traces: int = 1,
    at: datetime = T0,
    status: str = "completed",
    seed: int = 0,
) -> list[Event]:
    """One step: StepStarted, traces, measurements, StepFinished(status)."""
    rng = np.random.default_rng(seed)
    events: list[Event] = [StepStarted(run_id, path, "scan", index, 100, at)]
    for k in range(n_traces):
        samples = rng.normal(0.0, 1e-3, 256)
        events.append(
            TraceCaptured(
                run_id, path, f"trace{k}", samples, 1e-9, -20e-9, "CHAN1", 16,
                {"channel": k % 8 + 1, "output": "x1"},
            )
        )  # fmt: skip
    for k in range(n_measurements):
        value = float(rng.normal(1.0, 0.01))
        events.append(
            MeasurementMade(
                run_id,
                path,
                Measurement("gain", value, "V/V", 0.002, k % 8 + 1, "x1", None, 0.95, 1.05, "pass"),
            )
        )
    end = at + timedelta(seconds=2)
    events.append(
        StepFinished(
            run_id, path, "scan", status, at, end, {"amplitude_mV": 100.0}, {"points": index},
            "" if status == "completed" else "scope did not trigger",
        )
    )  # fmt: skip
    return events


def safety(run_id: int, path: str, kind: str = "ramp_start", at: datetime = T0) -> SafetyEvent:
    return SafetyEvent(run_id, path, kind, at, {"volts": 42.0, "rate_V_per_s": 5.0})


def finished(
    run_id: int, status: str = "completed", reason: str = "", at: datetime = T0
) -> RunFinished:
    return RunFinished(run_id, status, at + timedelta(minutes=5), reason)
