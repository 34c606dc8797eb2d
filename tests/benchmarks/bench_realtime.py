"""One board on a bench that takes real time: ``python -m tests.benchmarks --only realtime``.

* ``qualify_realtime``: procedures/qualify-preamp.yaml on drivers/sim/boards/example-pa8.yaml with
  the simulator in real time (``start_sim_bench(realtime=True)``, what ``run --realtime`` does): every
  acquisition, counter gate, relay settling and message round trip takes the time the timing model
  (drivers/timing.py) says a real bench takes.  Ours: the run's wall time.  Baseline, in the same run:
  the floor, the sum of the waits the measurement statistics demand: acquisitions, gates, relay
  settles and supply ramps as the bench's clock accounted them, plus the procedure's own ``wait``
  steps (settling and soak times it asks for).  Everything above the floor is ours to cut: round
  trips (about 1 ms a message), the engine, the analysis and the store.  Goal: ratio <= 1.2.
"""

from __future__ import annotations

import sys
import tempfile
import time
from collections import defaultdict
from datetime import UTC, datetime
from pathlib import Path

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.events import Event, StepFinished
from sequencer.procedure import load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = ROOT / "procedures" / "qualify-preamp.yaml"
GOAL = 1.2


def qualify_realtime(procedure: Path = PROCEDURE, board: Path = BOARD) -> dict:
    plan = plan_for(load_procedure(procedure), "NR-PA8-0001")
    waits = sum(float(s.args["seconds"]) for s in plan.steps if s.kind == "wait")
    per_kind: dict[str, float] = defaultdict(float)

    def on_event(event: Event) -> None:
        if isinstance(event, StepFinished):
            per_kind[event.kind] += (event.finished_at - event.started_at).total_seconds()

    with (
        tempfile.TemporaryDirectory() as tmp,
        Store.open(f"sqlite:///{tmp}/bench.db") as store,
        start_sim_bench(board, realtime=True) as sim,
        open_bench(bench_from_mapping(sim.bench_mapping(), source="<bench>")) as bench,
        store.writing_behind() as recorder,  # as `benchwright run` records (sequencer/compose.py)
    ):
        info = describe_run(plan, bench, operator="bench")
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        runner = Runner(plan, bench, run_id=run_id, subscribers=[recorder, on_event],
                        options=RunOptions(unattended=True, handle_signals=False), info=info)  # fmt: skip
        start = time.perf_counter()
        runner.run()
        wall = time.perf_counter() - start
        pace = sim.pace
        floor = pace.demanded_s() + waits
        return {"wall": wall, "floor": floor, "waits": waits, "clock": pace.breakdown(),
                "per_kind": dict(per_kind)}  # fmt: skip


def run() -> list[dict]:
    r = qualify_realtime()
    wall, floor = r["wall"], r["floor"]
    print(f"qualify_realtime: {wall:.1f} s against a floor of {floor:.1f} s "
          f"(procedure waits {r['waits']:.1f} s)", file=sys.stderr)  # fmt: skip
    for kind, seconds in r["clock"].items():
        print(f"  bench clock {kind:12s} {seconds:7.2f} s", file=sys.stderr)
    slowest = sorted(r["per_kind"].items(), key=lambda kv: -kv[1])[:8]
    print(
        "  slowest step kinds: " + ", ".join(f"{k} {s:.1f} s" for k, s in slowest)
        + " (an analysis computes while the steps after it run: its time overlaps theirs)",
        file=sys.stderr,
    )  # fmt: skip
    ratio = wall / floor
    return [
        {
            "name": "qualify_realtime",
            "ours": wall,
            "baseline": floor,
            "unit": "s per board",
            "ratio": ratio,
            "goal": f"<= {GOAL:g}x the floor (waits the statistics demand)",
            "verdict": "met" if ratio <= GOAL else "short",
            "detail": {k: round(v, 3) for k, v in r["clock"].items()},
        }
    ]
