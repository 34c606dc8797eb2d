"""Start-up of a command that only reads the store.

* ``cli_start``: ``benchwright runs`` (as ``python -m sequencer runs``) on a small SQLite database
  (the schema, no runs), as a new process, wall time from spawn to exit.  Baseline: a new
  ``python -c "import sqlite3"`` process -- the interpreter's own start-up and the database module,
  the floor no command can go under.  Goal (issue 21): ≤ 3×.  The database is a plain SQLite file,
  so ``runs`` reads it through ``sequencer.store.light`` (stdlib sqlite3, no SQLAlchemy).

Each side runs ``REPEATS`` times (15; ``BENCH_CLI_REPEATS``), alternating; the best of each is reported (least disturbed by the
other engineers' load on the machine).
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

REPEATS = int(os.environ.get("BENCH_CLI_REPEATS", "15"))
GOAL = 3.0
TIMEOUT_S = 120.0


def _wall(argv: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, check=True, capture_output=True, timeout=TIMEOUT_S)
    return time.perf_counter() - start


def run() -> list[dict[str, Any]]:
    from sequencer.store import Store

    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'small.db'}"
        with Store.open(url):
            pass
        ours_argv = [sys.executable, "-m", "sequencer", "runs", "--db", url]
        base_argv = [sys.executable, "-c", "import sqlite3"]
        ours, base = [], []
        for _ in range(REPEATS):
            ours.append(_wall(ours_argv))
            base.append(_wall(base_argv))
    best, floor = min(ours), min(base)
    ratio = best / floor
    return [{
        "name": "cli_start", "ours": best, "baseline": floor, "unit": "s", "ratio": ratio,
        "goal": f"≤ {GOAL:g}×", "verdict": "met" if ratio <= GOAL else "short",
    }]
