"""Full qualification benchmark: ``python -m tests.benchmarks --only qualify``.

* ``qualify_board``: procedures/qualify-preamp.yaml on the simulated 8-channel board
  drivers/sim/boards/example-pa8.yaml, wall time of the run (goal < 60 s).  Baseline: the real-time
  floor measured in the same run - the bias ramps and settle waits, which take the time they take
  whatever the software does; ratio = wall time / floor.

Where the time goes (printed to stderr and kept in the row's ``detail``), from the run's own events
and a timing wrapper around the store's subscriber:

* ``instrument_io``: handlers of the instrument steps (drivers, SCPI over TCP and the simulator,
  which runs in this process's threads and so shares its CPU);
* ``real_time``: ``bias.ramp`` and ``wait`` steps (the floor);
* ``analysis``: handlers of the ``analyse.*`` steps;
* ``store``: inside the store's subscriber (one transaction per completed step);
* ``engine``: the rest of the run (events, bookkeeping, interlock checks, safety read-back).
"""

from __future__ import annotations

import sys
import tempfile
import time
from collections import defaultdict
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.events import Event, StepFinished, StepStarted
from sequencer.procedure import load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = ROOT / "procedures" / "qualify-preamp.yaml"
GOAL_S = 60.0
REAL_TIME_KINDS = ("bias.ramp", "wait")


def _category(kind: str) -> str:
    if kind in REAL_TIME_KINDS:
        return "real_time"
    if kind.startswith("analyse."):
        return "analysis"
    return "instrument_io"


class _Timed:
    """Wraps a subscriber and adds up the time spent in it; ``inside[kind]`` is the part spent
    while a step of that kind ran (safety events, buffered traces), which the step's own interval
    also holds."""

    def __init__(self, subscriber: Callable[[Event], None]) -> None:
        self.subscriber = subscriber
        self.seconds = 0.0
        self.inside: dict[str, float] = defaultdict(float)
        self.kind: str | None = None

    def __call__(self, event: Event) -> None:
        start = time.perf_counter()
        self.subscriber(event)
        spent = time.perf_counter() - start
        self.seconds += spent
        if isinstance(event, StepStarted):
            self.kind = event.kind
            self.inside[event.kind] += spent  # the step's clock starts before this event
        elif isinstance(event, StepFinished):
            self.kind = None
        elif self.kind is not None:
            self.inside[self.kind] += spent


def qualify_once() -> dict[str, Any]:
    """One full qualification; wall time and its breakdown in seconds."""
    t0 = time.perf_counter()
    procedure = load_procedure(PROCEDURE)
    plan = plan_for(procedure, "NR-PA8-0001")
    planning = time.perf_counter() - t0
    per_kind: dict[str, float] = defaultdict(float)

    def on_event(event: Event) -> None:
        if isinstance(event, StepFinished):
            per_kind[event.kind] += (event.finished_at - event.started_at).total_seconds()

    with (
        tempfile.TemporaryDirectory() as tmp,
        Store.open(f"sqlite:///{tmp}/bench.db") as store,
        start_sim_bench(BOARD) as sim,
        open_bench(bench_from_mapping(sim.bench_mapping(), source="<bench>")) as bench,
    ):
        info = describe_run(plan, bench, operator="bench")
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        timed_store = _Timed(store.subscriber)
        runner = Runner(
            plan,
            bench,
            run_id=run_id,
            subscribers=[timed_store, on_event],
            options=RunOptions(unattended=True, handle_signals=False),
            info=info,
        )
        start = time.perf_counter()
        outcome = runner.run()
        wall = time.perf_counter() - start
    parts: dict[str, float] = defaultdict(float)
    for kind, seconds in per_kind.items():
        parts[_category(kind)] += seconds - timed_store.inside.get(kind, 0.0)
    parts["store"] = timed_store.seconds
    parts["engine"] = wall - sum(parts.values())
    return {
        "wall": wall,
        "planning": planning,
        "steps": len(plan.steps),
        "measurements": outcome.measurements,
        "parts": dict(parts),
        "per_kind": dict(per_kind),
    }


def run() -> list[dict]:
    r = qualify_once()
    wall, floor = r["wall"], r["parts"].get("real_time", 0.0)
    print(
        f"qualify_board: {r['steps']} steps, {r['measurements']} measurements, "
        f"{wall:.1f} s (+ {r['planning']:.2f} s loading and planning)",
        file=sys.stderr,
    )
    for name, seconds in sorted(r["parts"].items(), key=lambda kv: -kv[1]):
        print(f"  {name:14s} {seconds:7.2f} s  {100 * seconds / wall:5.1f} %", file=sys.stderr)
    slowest = sorted(r["per_kind"].items(), key=lambda kv: -kv[1])[:6]
    print("  slowest kinds: " + ", ".join(f"{k} {s:.2f} s" for k, s in slowest), file=sys.stderr)
    return [
        {
            "name": "qualify_board",
            "ours": wall,
            "baseline": floor,
            "unit": "s",
            "ratio": wall / floor if floor else None,
            "goal": f"< {GOAL_S:g} s",
            "verdict": "met" if wall < GOAL_S else "short",
            "detail": {k: round(v, 3) for k, v in r["parts"].items()},
        }
    ]
