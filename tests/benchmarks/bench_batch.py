"""Scale: ``python -m tests.benchmarks --only batch``.

* ``batch_100``: a batch of ``BENCH_BATCH_BOARDS`` (default 100) simulated 8-channel PA8 boards
  qualified in turn by the batch workflow (``qualify_batch``) into one SQLite store, each board on
  its own simulated bench.  ``ours`` is the median seconds per board of the last ten boards (91-100),
  ``baseline`` the median of the first ten (1-10), measured in the same run; goal (issue 21) ≤ 1.1×:
  a board does not take longer because the database holds the boards before it.  Medians, not
  means, so that one board slowed by another job on the shared machine does not decide it.
* ``batch_100_memory``: resident memory (``VmRSS`` of ``/proc/self/status``) after the last board
  over after board 10; goal ≤ 1.1×: a run's traces go to the store, nothing accumulates per board.

The procedure is reduced so that 100 boards fit in minutes: ``procedures/noise.yaml`` (every
channel, both fast outputs: relay routing, scope captures stored as traces, noise values judged
against the PA8 limits) with 500 points and one capture per output.  The first board also pays the
imports; it is board 1 of the baseline all the same (the median keeps it from mattering).
Not a test: too long for the test command (pytest does not collect ``bench_*.py``).
"""

from __future__ import annotations

import os
import re
import statistics
import tempfile
import time
from pathlib import Path
from typing import Any

import yaml

ROOT = Path(__file__).resolve().parents[2]
BOARDS = int(os.environ.get("BENCH_BATCH_BOARDS", "100"))
DECILE = 10
GOAL = 1.1
TEMPLATE = ROOT / "sequencer" / "demo" / "NR-PA8-0101.yaml"


def _rss_kib() -> int:
    text = Path("/proc/self/status").read_text()
    match = re.search(r"^VmRSS:\s+(\d+) kB", text, re.M)
    return int(match.group(1)) if match else 0


def _write_scenario(folder: Path, boards: int) -> Path:
    board = yaml.safe_load(TEMPLATE.read_text())
    serials = [f"BW-SCALE-{i:04d}" for i in range(1, boards + 1)]
    for i, serial in enumerate(serials, start=1):
        (folder / f"{serial}.yaml").write_text(yaml.safe_dump({**board, "serial": serial, "seed": i}))
    batch = {
        "batch": "BW-SCALE-100",
        "procedure": str(ROOT / "procedures" / "noise.yaml"),
        "board_type": "PA8",
        "operator": "benchmark",
        "boards": [{"serial": s} for s in serials],
    }
    path = folder / "batch.yaml"
    path.write_text(yaml.safe_dump(batch, sort_keys=False))
    return path


def run() -> list[dict[str, Any]]:
    from sequencer.batchrun import BatchOptions, qualify_batch
    from sequencer.procedure import load_batch
    from sequencer.store import Store

    if BOARDS < 2 * DECILE:
        raise SystemExit(f"BENCH_BATCH_BOARDS={BOARDS}: needs at least {2 * DECILE} boards")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        batch = load_batch(_write_scenario(folder, BOARDS))
        ends: list[float] = []
        rss: list[int] = []

        def after_board(outcome: Any) -> None:
            if outcome.status not in ("passed", "failed"):
                raise RuntimeError(f"board {outcome.serial} {outcome.status}: {outcome.note}")
            ends.append(time.perf_counter())
            rss.append(_rss_kib())

        options = BatchOptions(
            sim_dir=str(folder), unattended=True, requalify=True, echo=lambda line: None,
            handle_signals=False, overrides={"points": 500, "captures": 1}, on_board=after_board,
        )
        with Store.open(f"sqlite:///{folder / 'results.db'}") as store:
            started = time.perf_counter()
            qualify_batch(batch, store, options)
            db_mib = (folder / "results.db").stat().st_size / 2**20
    if len(ends) != BOARDS:
        raise RuntimeError(f"{len(ends)} of {BOARDS} boards reported")
    per_board = [b - a for a, b in zip([started, *ends[:-1]], ends, strict=True)]
    first = statistics.median(per_board[:DECILE])
    last = statistics.median(per_board[-DECILE:])
    memory = rss[-1] / rss[DECILE - 1]
    unit = f"s per board (median; {BOARDS} boards, database {db_mib:.0f} MiB at the end)"
    return [
        {
            "name": "batch_100", "ours": last, "baseline": first, "unit": unit,
            "ratio": last / first, "goal": f"≤ {GOAL:g}× (boards {BOARDS - DECILE + 1}-{BOARDS} "
            f"vs 1-{DECILE})", "verdict": "met" if last / first <= GOAL else "short",
        },
        {
            "name": "batch_100_memory", "ours": rss[-1] / 1024, "baseline": rss[DECILE - 1] / 1024,
            "unit": "MiB resident", "ratio": memory,
            "goal": f"≤ {GOAL:g}× (after board {BOARDS} vs after board {DECILE})",
            "verdict": "met" if memory <= GOAL else "short",
        },
    ]
