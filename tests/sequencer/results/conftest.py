"""A real SQLite results database with two full runs of the invented batch NR-B07 (channel 2 of
NR-PA8-0002 with a gain 30 % high) and one run of another batch, filled through the store's API."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path

import pytest

from sequencer.store import Store
from tests.sequencer.reports.simulated_runs import T0, RunSpec, record_run


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Store]]:
    url = f"sqlite:///{tmp_path_factory.mktemp('results') / 'results.db'}"
    with Store.open(url) as store:
        record_run(store, RunSpec(board="NR-PA8-0001", channels=3, seed=1))
        record_run(store, RunSpec(board="NR-PA8-0002", channels=3, seed=2,
                                  started_at=T0 + timedelta(hours=1), gain_scale={2: 1.3}))  # fmt: skip
        record_run(store, RunSpec(board="NR-PA8-0003", batch="NR-B08", channels=2, seed=3,
                                  full=False, started_at=T0 + timedelta(days=1)))  # fmt: skip
        yield url, store


@pytest.fixture
def out(tmp_path: Path) -> Path:
    return tmp_path
