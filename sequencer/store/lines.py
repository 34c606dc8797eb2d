"""What listings show of runs and batches: slim run lines, counts per run, batch lines.

Plain dataclasses (no SQLAlchemy): filled by ``overview`` through SQLAlchemy and by ``light``
through the standard library's sqlite3, so that a read-only command on an SQLite file need not
import SQLAlchemy.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime


@dataclass(frozen=True, kw_only=True)
class RunCounts:
    """What a run has stored so far."""

    run_id: int
    measurements: int = 0
    failed: int = 0
    steps_done: int = 0
    steps_failed: int = 0
    last_step: str = ""
    last_step_at: datetime | None = None

    def verdict(self, status: str) -> str:
        """``fail`` if any value is outside its limits, ``pass`` if completed without, else ``""``."""
        if self.failed:
            return "fail"
        return "pass" if status == "completed" else ""


@dataclass(frozen=True, slots=True)
class RunLine:
    """A run as a listing shows it: no documents, no instruments (cheap for thousands of runs).
    Fields in the order of ``LINE_COLUMNS`` (rows are unpacked into it positionally)."""

    id: int
    procedure: str
    procedure_version: str
    board: str
    board_type: str
    batch: str
    operator: str
    bench: str
    status: str
    reason: str
    started_at: datetime
    ended_at: datetime | None


@dataclass(frozen=True, kw_only=True)
class BatchLine:
    """A batch as the listing shows it: its runs and boards, first and last start."""

    batch: str
    runs: int
    boards: int
    running: int
    first_started: datetime
    last_started: datetime


#: The ``runs`` columns of a ``RunLine``, in its field order.
LINE_COLUMNS: tuple[str, ...] = (
    "id", "procedure", "procedure_version", "board", "board_type", "batch", "operator", "bench",
    "status", "reason", "started_at", "ended_at",
)  # fmt: skip
