"""Resume on the run's own bench and board, unless the operator says otherwise (then recorded).

A run resumed on another bench, or on a simulated board other than the one it started with, would
mix two setups in one record.  Each difference is refused (bad input, exit 2) with the option that
accepts it; accepted, it becomes a caveat every certificate of the run prints.  A real bench cannot
tell which board is mounted: there the operator's word is all there is.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from drivers.bench import BenchSpec
from sequencer.compose import SIM_MARK
from sequencer.errors import OptionError


def recorded_sim_board(bench_text: str) -> str:
    """The board file a simulated run ran on, or "" for a run on a real bench."""
    first = bench_text.splitlines()[0] if bench_text else ""
    return first.removeprefix(SIM_MARK).strip() if first.startswith(SIM_MARK) else ""


def resume_differences(
    record: Any, spec: BenchSpec, sim_board: str | None, sim_serial: str | None
) -> tuple[list[str], list[str]]:
    """(bench differences, board differences) between the run's record and where it would resume."""
    benches: list[str] = []
    boards: list[str] = []
    was_sim = recorded_sim_board(record.bench_text)
    if sim_board:
        now = str(Path(sim_board).resolve())
        if not was_sim:
            if spec.name != record.bench:  # a bench is known by its name
                benches.append(
                    f"on a simulated bench ({now}), not on bench {record.bench!r} it ran on"
                )
        elif now != was_sim:
            benches.append(f"on a simulation of {now}, not of {was_sim} it ran on")
        if sim_serial is not None and sim_serial != record.board:
            boards.append(f"with simulated board {sim_serial!r}, not {record.board!r} of the run")
    elif was_sim and spec.name:
        benches.append(f"on bench {spec.name!r}, not on the simulator of {was_sim} it ran on")
    elif spec.name != record.bench:
        benches.append(f"on bench {spec.name!r}, not on bench {record.bench!r} it ran on")
    return benches, boards


def check_resume_target(
    record: Any,
    spec: BenchSpec,
    sim_board: str | None,
    sim_serial: str | None,
    *,
    other_bench: bool,
    other_board: bool,
) -> tuple[str, ...]:
    """Refuse differences not accepted by an option; the accepted ones as caveats to record."""
    benches, boards = resume_differences(record, spec, sim_board, sim_serial)
    refused = [f"resume {d} (--allow-other-bench accepts it)" for d in benches if not other_bench]
    refused += [f"resume {d} (--allow-other-board accepts it)" for d in boards if not other_board]
    if refused:
        raise OptionError(*refused)
    return tuple(f"resumed {d} (--allow-other-bench)" for d in benches) + tuple(
        f"resumed {d} (--allow-other-board)" for d in boards
    )
