"""Run log: a subscriber writing one plain text line per event to a file."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from types import TracebackType
from typing import IO

from sequencer.events import (
    Event,
    MeasurementMade,
    RunFinished,
    RunStarted,
    SafetyEvent,
    StepFinished,
    StepStarted,
    TraceCaptured,
)


def format_event(event: Event) -> str:
    """One line (no newline) describing ``event``."""
    if isinstance(event, RunStarted):
        i = event.info
        return (
            f"{event.at.isoformat()} run {event.run_id} started: {i.procedure} {i.procedure_version} "
            f"board {i.board} bench {i.bench} operator {i.operator or '-'}"
        )
    if isinstance(event, StepStarted):
        return f"{event.at.isoformat()} step {event.index + 1}/{event.total} {event.path} ({event.kind})"
    if isinstance(event, TraceCaptured):
        return (
            f"- trace {event.name} at {event.path}: {len(event.samples)} samples, "
            f"dt {event.dt_s:g} s, {event.source or '?'} x{event.averages}"
            + "".join(f", {k} {v}" for k, v in sorted(event.meta.items()))
        )
    if isinstance(event, MeasurementMade):
        m = event.measurement
        where = f"ch{m.channel}" if m.channel is not None else "board"
        if m.output:
            where += f"/{m.output}"
        if m.aggressor is not None:
            where += f" from ch{m.aggressor}"
        unc = f" ± {m.uncertainty:.4g}" if m.uncertainty is not None else ""
        return (
            f"- {m.quantity} {where} = {m.value:.6g}{unc} {m.unit} "
            f"[{_bound(m.low)}, {_bound(m.high)}] {m.verdict}"
        )
    if isinstance(event, SafetyEvent):
        detail = " ".join(f"{k}={v}" for k, v in event.detail.items())
        return f"{event.at.isoformat()} SAFETY {event.kind} {event.path or '-'} {detail}".rstrip()
    if isinstance(event, StepFinished):
        secs = (event.finished_at - event.started_at).total_seconds()
        err = f": {event.error}" if event.error else ""
        return f"{event.finished_at.isoformat()} {event.status} {event.path} in {secs:.3f} s{err}"
    if isinstance(event, RunFinished):
        tail = f": {event.reason}" if event.reason else ""
        return f"{event.at.isoformat()} run {event.run_id} {event.status}{tail}"
    return f"{type(event).__name__}"


def _bound(x: float | None) -> str:
    return "-" if x is None else f"{x:g}"


class RunLog:
    """Append one line per event to ``path`` (flushed per line, so a killed run keeps its log).

    A write that fails (a full device, an I/O error) raises, unless ``on_failure`` is given: then it
    is called once with one line naming the cause (the CLI asks the run to stop: safe state, run
    ``aborted``), ``failure`` keeps that line and later events are not written.
    """

    def __init__(self, path: str | Path, *, on_failure: Callable[[str], None] | None = None) -> None:
        self.path = Path(path)
        self.on_failure = on_failure
        self.failure = ""
        self._file: IO[str] | None = self.path.open("a", encoding="utf-8")

    def __call__(self, event: Event) -> None:
        if self.failure:
            return
        if self._file is None:
            raise ValueError(f"run log {self.path} is closed")
        try:
            self._file.write(format_event(event).replace("\n", " ") + "\n")
            self._file.flush()
        except OSError as exc:
            if self.on_failure is None:
                raise
            self.failure = f"cannot write the run log {self.path}: {exc.strerror or exc}"
            self.on_failure(self.failure)

    def close(self) -> None:
        if self._file is not None:
            file, self._file = self._file, None
            try:
                file.close()
            except OSError as exc:  # the last buffered line: kept as the failure, not raised
                if self.on_failure is None:
                    raise
                self.failure = self.failure or f"cannot close the run log {self.path}: {exc.strerror}"

    def __enter__(self) -> RunLog:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()
