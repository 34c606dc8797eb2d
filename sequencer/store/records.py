"""What the store hands back: frozen records, independent of the ORM session that read them."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sequencer.events import InstrumentInfo, RunInfo


@dataclass(frozen=True, kw_only=True)
class RunRecord:
    """One run with all its provenance and its current status."""

    id: int
    procedure: str
    procedure_version: str
    procedure_sha256: str
    procedure_path: str
    procedure_text: str
    bench: str
    bench_text: str
    board: str
    board_type: str
    batch: str
    operator: str
    software_version: str
    parameters: Mapping[str, Any]
    instruments: tuple[InstrumentInfo, ...]
    repeat_of: int | None
    status: str
    reason: str
    started_at: datetime
    ended_at: datetime | None
    host: str
    pid: int

    def to_info(self) -> RunInfo:
        """The run's provenance as the engine gave it (for ``--repeat``: a new run of the same text)."""
        return RunInfo(
            procedure=self.procedure,
            procedure_version=self.procedure_version,
            procedure_text=self.procedure_text,
            procedure_sha256=self.procedure_sha256,
            procedure_path=self.procedure_path,
            bench=self.bench,
            board=self.board,
            board_type=self.board_type,
            operator=self.operator,
            software_version=self.software_version,
            instruments=self.instruments,
            parameters=dict(self.parameters),
            bench_text=self.bench_text,
            batch=self.batch,
            repeat_of=self.repeat_of,
        )


@dataclass(frozen=True, kw_only=True)
class StepRecord:
    """Any finished step (completed, failed or skipped) in the order it was written."""

    path: str
    kind: str
    position: int | None
    status: str
    started_at: datetime
    finished_at: datetime
    error: str


@dataclass(frozen=True, kw_only=True)
class SeriesPoint:
    """One point of a quantity's trend: a completed run's value."""

    run_id: int
    started_at: datetime
    value: float | None
    uncertainty: float | None
    low: float | None
    high: float | None
    verdict: str
    channel: int | None
    output: str | None


@dataclass(frozen=True, kw_only=True)
class SafetyRecord:
    run_id: int
    path: str
    kind: str
    at: datetime
    detail: Mapping[str, Any]


@dataclass(frozen=True, kw_only=True)
class Annotation:
    """A note or an audit entry (``kind``: note, finished, resumed, interrupted)."""

    run_id: int
    at: datetime
    kind: str
    author: str
    text: str
    detail: Mapping[str, Any]
