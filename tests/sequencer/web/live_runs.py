"""A run of the shipped quick-gain procedure recorded step by step through the store's API, the
way the engine records one, so that the live view can be watched while it grows (invented board
NR-PA8-0201 of the invented lab "Nordring")."""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

from sequencer.events import (
    Measurement,
    MeasurementMade,
    RunFinished,
    RunInfo,
    StepFinished,
    StepStarted,
)
from sequencer.procedure import board_info, build_plan, load_board_type, load_procedure

ROOT = Path(__file__).resolve().parents[3]
QUICK_GAIN = ROOT / "procedures" / "examples" / "quick-gain.yaml"
BOARD = "NR-PA8-0201"


def quick_gain_plan() -> Any:
    return build_plan(load_procedure(QUICK_GAIN), board_info(load_board_type("PA8"), BOARD))


def run_info(batch: str = "NR-B09") -> RunInfo:
    text = QUICK_GAIN.read_text(encoding="utf-8")
    return RunInfo(
        procedure="quick-gain", procedure_version="1.0", procedure_text=text,
        procedure_sha256=hashlib.sha256(text.encode()).hexdigest(),
        procedure_path=str(QUICK_GAIN), bench="bench-3", board=BOARD, board_type="PA8",
        operator="m.okafor", software_version="0.1.0", batch=batch,
    )  # fmt: skip


class LiveRun:
    """Feeds the store one plan step at a time (``advance``), each step ``step_s`` apart."""

    def __init__(self, store: Any, started_at: datetime, step_s: float = 2.0) -> None:
        self.store = store
        self.plan = quick_gain_plan()
        self.started_at = started_at
        self.step_s = step_s
        self.run_id = store.create_run(run_info(), started_at)
        self.done = 0

    def advance(self, steps: int = 1, gain: float | None = None, channel: int = 1) -> None:
        for _ in range(steps):
            step = self.plan.steps[self.done]
            at = self.started_at + timedelta(seconds=self.step_s * self.done)
            end = at + timedelta(seconds=self.step_s)
            self.store.handle(StepStarted(self.run_id, step.path, step.kind, self.done, len(self.plan.steps), at))
            if gain is not None:
                verdict = "pass" if 0.9 <= gain <= 1.1 else "fail"
                m = Measurement("gain", gain, "V/V", 0.002, channel, "x1", None, 0.9, 1.1, verdict)
                self.store.handle(MeasurementMade(self.run_id, step.path, m))
            self.store.handle(StepFinished(self.run_id, step.path, step.kind, "completed", at, end))
            self.done += 1

    def finish(self, status: str = "completed") -> None:
        at = self.started_at + timedelta(seconds=self.step_s * (self.done + 1))
        self.store.handle(RunFinished(self.run_id, status, at, "" if status == "completed" else "operator"))
