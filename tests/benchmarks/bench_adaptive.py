"""Adaptive scans: ``python -m tests.benchmarks --only adaptive``.

* ``adaptive_scans``: the instrument time of procedures/qualify-preamp.yaml on
  drivers/sim/boards/example-pa8.yaml with adaptive S-curves (``adaptive: true``, its default since
  they were validated; targets 0.015 mV)
  against the same qualification with the fixed grids (29 thresholds x 500 pulses), both in the same
  run.  Instrument time is what the bench's clock accounted for the waits the statistics demand
  (acquisitions, gates, settles, ramps; drivers/sim/clock.py), not wall time.  The fixed grid
  reaches about 0.013 mV on these channels (tests/integration/test_adaptive_scans.py), so the
  targets ask for about the same uncertainty.  Goal: ratio <= 0.5.  The row also says whether both
  runs gave the same verdict for every value and the same discriminator values (the ones the
  option changes) within 3 combined standard uncertainties (the others come from identical steps;
  the bias current differs only by the meter's draws, whose number follows the machine's load).
  Only the S-curves adapt yet: the amplitude scans and noise captures are still fixed.
"""

from __future__ import annotations

import math
import sys
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from drivers.bench import bench_from_mapping, open_bench
from drivers.sim import start_sim_bench
from sequencer.compose import plan_for
from sequencer.engine import Runner, RunOptions, describe_run
from sequencer.procedure import load_procedure
from sequencer.store import Store

ROOT = Path(__file__).resolve().parents[2]
BOARD = ROOT / "drivers" / "sim" / "boards" / "example-pa8.yaml"
PROCEDURE = ROOT / "procedures" / "qualify-preamp.yaml"
GOAL = 0.5


def qualify(folder: Path, overrides: dict[str, Any]) -> dict[str, Any]:
    plan = plan_for(load_procedure(PROCEDURE), "NR-PA8-0001", overrides=overrides)
    name = "adaptive" if overrides["adaptive"] else "fixed"
    with (
        Store.open(f"sqlite:///{folder}/{name}.db") as store,
        start_sim_bench(BOARD) as sim,
        open_bench(bench_from_mapping(sim.bench_mapping(), source="<bench>")) as bench,
    ):
        info = describe_run(plan, bench, operator="bench")
        run_id = store.create_run(info, started_at=datetime.now(UTC))
        runner = Runner(plan, bench, run_id=run_id, subscribers=[store.subscriber],
                        options=RunOptions(unattended=True, handle_signals=False), info=info)  # fmt: skip
        runner.run()
        values = {
            (m.quantity, m.channel, m.output, m.aggressor): m
            for m in store.measurements(run_id=run_id)
        }
        return {"demanded": sim.pace.demanded_s(), "clock": sim.pace.breakdown(), "values": values}


DISCRIMINATOR = ("threshold_mV", "threshold_sigma_mV", "discriminator_offset_mV")


def _agree(a: Any, b: Any) -> bool:
    if b is None or a.verdict != b.verdict:
        return False
    if a.quantity not in DISCRIMINATOR or a.value == b.value:
        return True
    if not (a.measured and b.measured):
        return False
    u = math.hypot(a.uncertainty or 0.0, b.uncertainty or 0.0)
    return abs(a.value - b.value) <= 3 * u


def run() -> list[dict]:
    with tempfile.TemporaryDirectory() as tmp:
        fixed = qualify(Path(tmp), {"adaptive": False})
        adaptive = qualify(Path(tmp), {"adaptive": True})
    differ = [
        k for k in fixed["values"] if not _agree(fixed["values"][k], adaptive["values"].get(k))
    ]
    same = not differ and fixed["values"].keys() == adaptive["values"].keys()
    ratio = adaptive["demanded"] / fixed["demanded"]
    print(f"adaptive_scans: {adaptive['demanded']:.1f} s of instrument time against "
          f"{fixed['demanded']:.1f} s; same values and verdicts: {same}", file=sys.stderr)  # fmt: skip
    for kind in fixed["clock"]:
        print(f"  {kind:12s} {adaptive['clock'][kind]:7.2f} s vs {fixed['clock'][kind]:7.2f} s",
              file=sys.stderr)  # fmt: skip
    for key in differ[:10]:
        f, a = fixed["values"][key], adaptive["values"].get(key)
        print(f"  differs: {key}: {f.value} ({f.verdict}) vs {a and a.value} ({a and a.verdict})",
              file=sys.stderr)  # fmt: skip
    return [
        {
            "name": "adaptive_scans",
            "ours": adaptive["demanded"],
            "baseline": fixed["demanded"],
            "unit": "s of instrument time per board",
            "ratio": ratio,
            "goal": f"<= {GOAL:g} (same values and verdicts)",
            "verdict": "met" if ratio <= GOAL and same else "short",
        }
    ]
