"""The demo end to end: ``python -m tests.benchmarks --only demo``.

* ``demo``: wall time of ``benchwright demo`` run as a user runs it (a child process, the installed
  entry point's module): three batches (five 8-channel preamp boards, three scintillator modules,
  two trigger-chain modules) on four simulated benches at once, 16 real-time bias ramps, 51
  certificates, the batch reports (goal, issue 21: under 60 s on a 2-core machine; 103 s on the
  idle machine with the batches one after the other).  Baseline: the same child process running
  ``benchwright --version`` (interpreter start and imports), so the ratio says how much of the time
  is the demo's own work.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

GOAL_S = 60.0
ROOT = Path(__file__).resolve().parents[2]


def _timed(args: list[str]) -> float:
    started = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "sequencer", *args],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        raise RuntimeError(f"benchwright {' '.join(args)} exited {done.returncode}: {done.stderr}")
    return seconds


def run() -> list[dict]:
    start_up = min(_timed(["--version"]) for _ in range(3))
    with tempfile.TemporaryDirectory() as tmp:
        seconds = _timed(["demo", "--out", str(Path(tmp) / "demo")])
    return [
        {
            "name": "demo",
            "ours": seconds,
            "baseline": start_up,
            "unit": "s",
            "ratio": seconds / start_up,
            "goal": f"< {GOAL_S:.0f} s (baseline: start-up alone)",
            "verdict": "met" if seconds < GOAL_S else "short",
        }
    ]
