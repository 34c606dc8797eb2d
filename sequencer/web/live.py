"""What the live view shows of a run, read from the store alone: progress with an ETA, the step
now running, a channel × quantity grid of verdicts, the latest trace.

Any bench writing to the same database shows up: the store is the only channel.  The plan of a run
(how many steps, which comes next) is expanded again from the procedure text stored with the run
and its board type; when that is impossible (a lab's board type missing here) the view says so and
shows the steps done without a total or an ETA.

ETA: the pace so far (elapsed time / steps finished) times the steps left: an estimate, labelled
as such on the page.  ``quiet_s`` is the time since the run last stored a step: a run whose
process died on another host stays ``running`` in the database, and the page says how long it
has been silent instead of pretending it is moving (``QUIET_WARN_S``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np

from sequencer.errors import BenchwrightError
from sequencer.store.overview import last_position, latest_trace, run_counts

VERDICT_RANK = {"": 0, "info": 1, "pass": 2, "fail": 3}
QUIET_WARN_S = 120.0  # the page warns when a running run stored nothing for this long
TRACE_POINTS = 400  # the latest trace is decimated to at most this many points


@dataclass(frozen=True, kw_only=True)
class PlanOutline:
    """The expanded plan of a run as far as the live view needs it."""

    paths: tuple[str, ...]
    channels: int
    problem: str = ""  # why there is no plan ("" when there is one)

    @property
    def total(self) -> int | None:
        return len(self.paths) if not self.problem else None


def outline_run(store: Any, run: Any) -> PlanOutline:
    """Expand the run's stored procedure for its board again, from the texts stored with the run
    (fragments, limit set, board type) where it has them, else today's files (no instruments)."""
    from sequencer.inputs import loader_files, of_kind
    from sequencer.procedure import board_info, build_plan, load_board_type, load_procedure_text
    from sequencer.procedure.boards import board_type_of_input

    try:
        inputs = tuple(store.run_inputs(run.id))
        path = run.procedure_path or f"run-{run.id}.yaml"
        proc = load_procedure_text(run.procedure_text, path, files=loader_files(inputs) or None)
        kept = of_kind(inputs, "board_type")
        if kept:
            template = board_type_of_input(kept[0])
        else:
            template = load_board_type(run.board_type or proc.board_type)
        plan = build_plan(proc, board_info(template, run.board))
    except (BenchwrightError, OSError, ValueError, KeyError) as exc:
        return PlanOutline(paths=(), channels=0, problem=f"no plan for this run here: {exc}")
    return PlanOutline(paths=tuple(s.path for s in plan.steps), channels=int(plan.board.channels))


class Outlines:
    """Plan outlines per run id, expanded once per application (a run's plan never changes)."""

    def __init__(self) -> None:
        self._known: dict[int, PlanOutline] = {}

    def of(self, store: Any, run: Any) -> PlanOutline:
        if run.id not in self._known:
            self._known[run.id] = outline_run(store, run)
        return self._known[run.id]


def _eta(done: int, total: int | None, elapsed_s: float) -> float | None:
    if total is None or done <= 0 or elapsed_s <= 0:
        return None
    return max(0, total - done) * elapsed_s / done


def _cell_key(m: Any) -> str:
    return m.quantity if not m.output else f"{m.quantity} {m.output}"


def verdict_grid(measurements: list[Any], channels: int) -> dict[str, Any]:
    """Columns (quantity [output], in order of first appearance), rows per channel (1..N and any
    other channel measured) with the worst verdict of each cell, and the board's own values."""
    columns: dict[str, None] = {}
    cells: dict[Any, dict[str, Any]] = {}
    board: dict[Any, dict[str, Any]] = {}
    for m in measurements:
        key = _cell_key(m)
        target, where = (board, key) if m.channel is None else (cells, (int(m.channel), key))
        if m.channel is not None:
            columns.setdefault(key, None)
        old = target.get(where)
        value = float(m.value) if math.isfinite(m.value) else None  # NaN: not measured
        new = {"verdict": m.verdict, "value": value, "unit": m.unit, "n": 1 + (old["n"] if old else 0)}
        if old and VERDICT_RANK.get(old["verdict"], 0) >= VERDICT_RANK.get(m.verdict, 0):
            new = {**old, "n": new["n"]}  # the worst verdict of the cell stays
        target[where] = new
    chans = sorted(set(range(1, channels + 1)) | {c for c, _ in cells})
    rows = [{"channel": c, "cells": [cells.get((c, k)) for k in columns]} for c in chans]
    return {"columns": list(columns), "rows": rows, "board": board}


def _trace_json(trace: Any) -> dict[str, Any] | None:
    if trace is None:
        return None
    y = np.asarray(trace.volts, dtype=np.float64) * 1e3
    step = max(1, math.ceil(y.size / TRACE_POINTS))
    idx = np.arange(0, y.size, step)
    t_ns = (trace.t0_s + idx * trace.dt_s) * 1e9
    ys = [None if not math.isfinite(v) else round(float(v), 4) for v in y[idx]]
    return {"name": trace.name, "path": trace.path, "t_ns": [round(float(t), 3) for t in t_ns],
            "mV": ys, "labels": dict(trace.labels or {})}  # fmt: skip


def live_snapshot(
    store: Any, run_id: int, outlines: Outlines, now: datetime | None = None, *, detail: bool = True
) -> dict[str, Any]:
    """Everything the live view of run ``run_id`` shows, as JSON-able values; ``detail=False``
    leaves out the grid and the trace (the list of running runs needs only the progress)."""
    run = store.get_run(run_id)
    outline = outlines.of(store, run)
    with store.engine.connect() as conn:
        counts = run_counts(conn, [run_id])[run_id]
        position = last_position(conn, run_id)
        trace = latest_trace(conn, run_id) if detail else None
    measurements = store.measurements(run_id=run_id) if detail else []
    total = outline.total
    done = counts.steps_done
    now = now or datetime.now(UTC)
    end = run.ended_at or now
    elapsed = max(0.0, (end - run.started_at).total_seconds())
    last_at = counts.last_step_at or run.started_at
    quiet = max(0.0, (now - last_at).total_seconds()) if run.status == "running" else None
    next_index = 0 if position is None else position + 1
    current = ""
    if run.status == "running" and total is not None and next_index < total:
        current = outline.paths[next_index]
    return {
        "run_id": run_id,
        "status": run.status,
        "reason": run.reason,
        "board": run.board,
        "procedure": run.procedure,
        "done": done,
        "total": total,
        "percent": None if not total else round(100.0 * min(done, total) / total, 1),
        "elapsed_s": round(elapsed, 1),
        "quiet_s": _round(quiet),
        "eta_s": None if run.status != "running" else _round(_eta(done, total, elapsed)),
        "plan_problem": outline.problem,
        "current_step": current,
        "last_step": counts.last_step,
        "measurements": counts.measurements,
        "failed": counts.failed,
        "verdict": counts.verdict(run.status),
        "grid": verdict_grid(measurements, outline.channels) if detail else None,
        "trace": _trace_json(trace),
    }


def _round(value: float | None) -> float | None:
    return None if value is None else round(value, 1)


def signature(snapshot: Mapping[str, Any]) -> tuple[Any, ...]:
    """What changes when something new is stored (the stream sends a snapshot only then)."""
    return (snapshot["status"], snapshot["done"], snapshot["measurements"], snapshot["last_step"])
