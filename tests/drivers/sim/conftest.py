"""Fixtures of the simulator tests (helpers live in simkit.py)."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
import pyvisa

from drivers.sim import BoardSpec, SimBench, start_sim_bench
from tests.drivers.sim.simkit import Sessions


@pytest.fixture(scope="module")
def rm() -> Iterator[pyvisa.ResourceManager]:
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


@pytest.fixture
def bench_of(rm: pyvisa.ResourceManager) -> Iterator[Any]:
    """Factory: start a bench for a board and open sessions; everything is stopped at teardown."""
    started: list[tuple[SimBench, Sessions]] = []

    def start(board: BoardSpec, **kwargs: Any) -> Sessions:
        bench = start_sim_bench(board, **kwargs)
        sessions = Sessions(rm, bench)
        started.append((bench, sessions))
        return sessions

    yield start
    for bench, sessions in started:
        sessions.close()
        bench.stop()
