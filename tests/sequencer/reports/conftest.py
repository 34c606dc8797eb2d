"""Fixtures: a real SQLite results database per test module, filled through the store's API."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from sequencer.reports import certify_run
from sequencer.store import Store

from .simulated_runs import RunSpec, record_run

BAD_CHANNEL = 3


@pytest.fixture
def store(tmp_path: Path) -> Iterator[Store]:
    with Store.open(f"sqlite:///{tmp_path / 'results.db'}") as s:
        yield s


@pytest.fixture(scope="session")
def certified(
    tmp_path_factory: pytest.TempPathFactory,
) -> Iterator[tuple[Store, int, list[Path], Path]]:
    """An 8-channel run (channel 3 with a gain 30 % high) and its certificates, in-process."""
    base = tmp_path_factory.mktemp("certified")
    db = base / "results.db"
    with Store.open(f"sqlite:///{db}") as s:
        run_id = record_run(s, RunSpec(channels=8, gain_scale={BAD_CHANNEL: 1.3}))
        paths = certify_run(s, run_id, base / "certificates", workers=1)
        yield s, run_id, paths, db
