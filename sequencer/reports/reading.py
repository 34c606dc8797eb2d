"""What the reports read from the results store: a small typed interface (STYLE.md rule 18).

``sequencer.store.Store`` satisfies it; the reports take this Protocol, never ``Any``, so a report
that starts needing another query shows up here, and a test can hand in any reader that answers
these eight queries.
"""

from __future__ import annotations

from datetime import datetime
from typing import Protocol, runtime_checkable

from sequencer.inputs import RunInput
from sequencer.records import Measurement, StepResult
from sequencer.store.records import (
    RunRecord,
    SafetyRecord,
    SeriesPoint,
)


@runtime_checkable
class StoreReader(Protocol):
    """The queries certificates, verify, trends and the batch summary make."""

    def get_run(self, run_id: int) -> RunRecord: ...

    def runs_of_batch(self, batch: str) -> list[RunRecord]: ...

    def measurements(
        self,
        run_id: int | None = None,
        board: str | None = None,
        procedure: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> list[Measurement]: ...

    def completed_steps(self, run_id: int, *, traces: bool = True) -> dict[str, StepResult]:
        """Path -> completed step; ``traces=False``: without its traces (no report prints one)."""
        ...

    def safety_events(self, run_id: int) -> list[SafetyRecord]: ...

    def caveats(self, run_id: int) -> list[str]: ...

    def run_inputs(self, run_id: int) -> tuple[RunInput, ...]: ...

    def quantity_series(
        self,
        board: str,
        quantity: str,
        channel: int | None = None,
        output: str | None = None,
        procedure: str | None = None,
    ) -> list[SeriesPoint]: ...
