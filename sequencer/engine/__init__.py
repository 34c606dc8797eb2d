"""The engine: runs a plan through the drivers, keeps the bias safe, emits the run's events.

Imports the procedure model, the analysis functions and the drivers; never the store or the CLI.
"""

from __future__ import annotations

from .preflight import bench_problems, build_caution, check_plan_against_bench
from .provenance import describe_run
from .records import Caution, RunOptions, RunOutcome, StepResult
from .runner import Runner

__all__ = [
    "Caution",
    "RunOptions",
    "RunOutcome",
    "Runner",
    "StepResult",
    "bench_problems",
    "build_caution",
    "check_plan_against_bench",
    "describe_run",
]
