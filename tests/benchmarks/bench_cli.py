"""Start-up of a command that only reads the store.

* ``cli_start``: ``benchwright runs`` (as ``python -m sequencer runs``) on a small SQLite database
  (the schema, no runs), as a new process, wall time from spawn to exit.  Baseline: a new
  ``python -c "import sqlite3"`` process -- the interpreter's own start-up and the database module,
  the floor no command can go under.  Goal (issue 21): ≤ 3×.  The database is a plain SQLite file,
  so ``runs`` reads it through ``sequencer.store.light`` (stdlib sqlite3, no SQLAlchemy).

* ``cli_verify``: ``benchwright verify`` of one HTML certificate of an 8-channel run, the database
  a plain SQLite file, so read through ``sequencer.store.light_records`` (stdlib sqlite3): start-up,
  the run gathered again, every check.  Baseline: the same ``import sqlite3`` floor.  Goal: issue
  21 item 4's "under 0.5 s" for a command that only reads the store, as a ratio so that the load of
  the day cancels: 0.5 s over the floor of the idle machine (~0.05 s) is ≤ 10×.

Both commands run with their bytecode cached, as an installed package has it (pip writes it): an
environment with ``PYTHONDONTWRITEBYTECODE`` set would have each run compile every module changed
since the cache was last written (about 0.3 s of verify's start-up here), so the commands run
without that variable, after one untimed warm-up that writes the cache (``__pycache__``, ignored
by git).

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
VERIFY_GOAL = 10.0
TIMEOUT_S = 120.0


def _wall(argv: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, check=True, capture_output=True, timeout=TIMEOUT_S, env=_ENV)
    return time.perf_counter() - start


_ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def _row(name: str, command: list[str], goal: float) -> dict[str, Any]:
    """``benchwright COMMAND`` against the interpreter floor, interleaved, best of ``REPEATS``."""
    ours_argv = [sys.executable, "-m", "sequencer", *command]
    base_argv = [sys.executable, "-c", "import sqlite3"]
    _wall(ours_argv)  # warm-up: the bytecode cache (module docstring)
    ours, base = [], []
    for _ in range(REPEATS):
        ours.append(_wall(ours_argv))
        base.append(_wall(base_argv))
    best, floor = min(ours), min(base)
    ratio = best / floor
    return {
        "name": name, "ours": best, "baseline": floor, "unit": "s", "ratio": ratio,
        "goal": f"≤ {goal:g}×", "verdict": "met" if ratio <= goal else "short",
    }


def run() -> list[dict[str, Any]]:
    from sequencer.reports import certify_run
    from sequencer.store import Store
    from tests.sequencer.reports.simulated_runs import RunSpec, record_run

    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'small.db'}"
        with Store.open(url):
            pass
        start = _row("cli_start", ["runs", "--db", url], GOAL)
        url = f"sqlite:///{Path(tmp) / 'certified.db'}"
        with Store.open(url) as store:
            run_id = record_run(store, RunSpec(channels=8))
            paths = certify_run(store, run_id, Path(tmp) / "certificates", workers=1)
        html = str(next(p for p in paths if p.suffix == ".html"))
        return [start, _row("cli_verify", ["verify", "--db", url, html], VERIFY_GOAL)]
