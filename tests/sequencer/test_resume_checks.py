"""resume on another bench or simulated board: refused unless accepted, then a caveat (issue 19)."""

from __future__ import annotations

from types import SimpleNamespace

import pytest

from drivers.bench import BenchSpec
from sequencer.compose import SIM_MARK
from sequencer.errors import OptionError
from sequencer.resume_checks import check_resume_target

SIM_RUN = SimpleNamespace(bench="sim-bench", board="NR-PA8-0001",
                          bench_text=f"{SIM_MARK}/lab/boards/a.yaml\nbench: sim-bench\n")
BENCH_RUN = SimpleNamespace(bench="bench-2", board="NR-PA8-0001", bench_text="bench: bench-2\n")


def spec(name: str) -> BenchSpec:
    return BenchSpec(name=name, instruments={})


def test_the_runs_own_bench_and_board_pass_without_a_caveat():
    assert check_resume_target(SIM_RUN, spec("sim-bench"), "/lab/boards/a.yaml", "NR-PA8-0001",
                               other_bench=False, other_board=False) == ()
    assert check_resume_target(BENCH_RUN, spec("bench-2"), None, None,
                               other_bench=False, other_board=False) == ()


def test_another_simulated_board_is_refused_with_the_option_that_accepts_it():
    with pytest.raises(OptionError) as caught:
        check_resume_target(SIM_RUN, spec("sim-bench"), "/lab/boards/b.yaml", "NR-PA8-0999",
                            other_bench=False, other_board=False)
    lines = caught.value.lines  # options have no file location: no "<options>:1:1:" prefix
    assert len(lines) == 2 and lines[0].startswith("resume on a simulation of ")
    assert "--allow-other-bench" in lines[0] and "--allow-other-board" in lines[1]
    caveats = check_resume_target(SIM_RUN, spec("sim-bench"), "/lab/boards/b.yaml", "NR-PA8-0999",
                                  other_bench=True, other_board=True)
    assert len(caveats) == 2 and "'NR-PA8-0999', not 'NR-PA8-0001'" in caveats[1]


def test_another_bench_file_is_refused_unless_accepted():
    with pytest.raises(OptionError, match="bench 'bench-7', not on bench 'bench-2'"):
        check_resume_target(BENCH_RUN, spec("bench-7"), None, None,
                            other_bench=False, other_board=False)
    assert check_resume_target(BENCH_RUN, spec("bench-7"), None, None,
                               other_bench=True, other_board=False)[0].endswith("(--allow-other-bench)")
