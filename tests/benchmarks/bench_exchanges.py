"""SCPI exchanges per qualified board: ``python -m tests.benchmarks --only exchanges``.

* ``scpi_exchanges``: procedures/qualify-preamp.yaml on the simulated board
  drivers/sim/boards/example-pa8.yaml over the generic dialect, which skips unchanged settings, joins
  commands and their error query into one message and checks the error queue once per group
  (drivers/scpi/messages.py).  Baseline, in the same run: the same procedure on the same board with a
  copy of the generic dialect whose ``messages:`` allows none of that (one command and one error
  query per message) and whose scope reads its preamble for every capture (``cache: false``,
  drivers/roles/preamble_cache.py).  An exchange is one program message sent (a query and its reply count once);
  counted by every role's session.  Goal: ratio <= 0.5.

Both runs must give the same verdict for every value, and every value that has an uncertainty must
agree within twice the combined standard uncertainty; the row says so, or is ``short``.  (The bias
leakage has none and is not compared by value: the current meter draws its noise per reading, and
how many readings a ramp takes follows the machine's load.)  For the same reason the bias supply's
messages (safety read-backs polled in time, never skipped) vary from run to run; the row prints
them apart.
"""

from __future__ import annotations

import math
import sys
import tempfile
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from drivers.bench import bench_from_mapping, open_bench
from drivers.dialect import shipped_dialect_path
from drivers.sim import start_sim_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.procedure import load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = ROOT / "procedures" / "qualify-preamp.yaml"
GOAL = 0.5
PLAIN_MESSAGES = "messages: {skip_unchanged: false, join: false, errors_per_group: false}"


def plain_generic(folder: Path) -> Path:
    """A copy of the generic dialect that allows no round-trip saving."""
    text = shipped_dialect_path("generic").read_text(encoding="utf-8")
    lines = [PLAIN_MESSAGES if ln.startswith("messages:") else ln for ln in text.splitlines()]
    if PLAIN_MESSAGES not in lines:
        raise SystemExit("the generic dialect has no 'messages:' line to switch off")
    # the scope's waveform preamble, read for every capture
    at = [i for i, ln in enumerate(lines) if ln.strip() == "preamble:"]
    if len(at) != 1:
        raise SystemExit("the generic dialect's waveform preamble was not found to switch off")
    lines.insert(at[0] + 1, " " * (len(lines[at[0]]) - len(lines[at[0]].lstrip()) + 2) + "cache: false")
    out = folder / "generic-plain.yaml"
    out.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return out


def qualify_counting(dialect: str | None, folder: Path) -> dict[str, Any]:
    """One qualification; messages and skipped settings per role, the values measured."""
    plan = plan_for(load_procedure(PROCEDURE), "NR-PA8-0001")
    values: list[Value] = []
    with (
        Store.open(f"sqlite:///{folder}/{'plain' if dialect else 'ours'}.db") as store,
        start_sim_bench(BOARD) as sim,
    ):
        mapping = sim.bench_mapping()
        if dialect is not None:
            for entry in mapping["instruments"].values():
                if entry["dialect"] == "generic":
                    entry["dialect"] = dialect
        with open_bench(bench_from_mapping(mapping, source="<bench>")) as bench:
            info = describe_run(plan, bench, operator="bench")
            run_id = store.create_run(info, started_at=datetime.now(UTC))
            runner = Runner(plan, bench, run_id=run_id, subscribers=[store.subscriber],
                            options=RunOptions(unattended=True, handle_signals=False), info=info)  # fmt: skip
            start = time.perf_counter()
            runner.run()
            wall = time.perf_counter() - start
            sessions = {r: bench.role(r).session for r in bench.spec.instruments}
            messages = {r: s.messages for r, s in sessions.items()}
            skipped = {r: s.skipped for r, s in sessions.items()}
        for m in store.measurements(run_id):
            key = f"{m.quantity}/{m.channel}/{m.output}/{m.aggressor}/{m.verdict}"
            values.append((key, m.value, m.uncertainty))
    return {"messages": messages, "skipped": skipped, "wall": wall, "values": sorted(values)}


Value = tuple[str, Any, Any]  # key, value, standard uncertainty (either may be None)


def _same(a: list[Value], b: list[Value]) -> bool:
    def agree(x: Value, y: Value) -> bool:
        (kx, vx, ux), (ky, vy, uy) = x, y
        if kx != ky:
            return False
        if vx == vy:
            return True
        if vx is None or vy is None:
            return False
        if ux is None and uy is None:
            return True  # no uncertainty to judge by: the verdicts are compared instead
        if math.isnan(vx) and math.isnan(vy):
            return True
        u = math.hypot(ux or 0.0, uy or 0.0)
        return math.isfinite(u) and abs(vx - vy) <= 2 * u

    return len(a) == len(b) and all(agree(x, y) for x, y in zip(a, b, strict=True))


def run() -> list[dict]:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        ours = qualify_counting(None, folder)
        plain = qualify_counting(str(plain_generic(folder)), folder)
    n_ours, n_plain = sum(ours["messages"].values()), sum(plain["messages"].values())
    same = _same(ours["values"], plain["values"])
    print(f"scpi_exchanges: {n_ours} messages (skipped {sum(ours['skipped'].values())} settings) "
          f"vs {n_plain} plain; same values: {same}; wall {ours['wall']:.1f} s vs "
          f"{plain['wall']:.1f} s", file=sys.stderr)  # fmt: skip
    for role in ours["messages"]:
        print(f"  {role:10s} {ours['messages'][role]:6d} vs {plain['messages'][role]:6d}",
              file=sys.stderr)  # fmt: skip
    ratio = n_ours / n_plain
    return [
        {
            "name": "scpi_exchanges",
            "ours": n_ours,
            "baseline": n_plain,
            "unit": "messages per board",
            "ratio": ratio,
            "goal": f"<= {GOAL:g} (same values measured)",
            "verdict": "met" if ratio <= GOAL and same else "short",
            "detail": {"ours": ours["messages"], "plain": plain["messages"], "same_values": same},
        }
    ]
