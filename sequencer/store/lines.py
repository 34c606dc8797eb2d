"""What listings show of runs and batches: slim run lines, counts per run, batch lines.

Plain dataclasses (no SQLAlchemy): filled by ``overview`` through SQLAlchemy and by ``light``
through the standard library's sqlite3, so that a read-only command on an SQLite file need not
import SQLAlchemy.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime
from typing import Any


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


def as_seen(line: RunLine, gone: dict[int, Any]) -> RunLine:
    """``line`` as a reader sees it now: a run stored as ``running`` whose recorder is gone
    (``gone``: ``liveness.Gone`` by run id) is shown ``interrupted (dead)`` / ``interrupted
    (stale)``, ended at the last moment known, with the reason -- the stored row is not changed."""
    seen = gone.get(line.id) if line.status == "running" else None
    if seen is None:
        return line
    return replace(line, status=f"interrupted ({seen.state})", reason=seen.reason, ended_at=seen.ended_at)
