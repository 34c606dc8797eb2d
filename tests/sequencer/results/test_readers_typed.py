"""The readers of the store are typed by what they read (STYLE.md: typed public functions): a
Protocol each, never ``Any``, and both store paths (the ``Store``, the stdlib ``LightRecords``)
satisfy them, while an object lacking a query does not."""

from __future__ import annotations

import typing
from collections.abc import Iterable, Mapping
from pathlib import Path

from sequencer.inputs import RunInput
from sequencer.records import StepResult
from sequencer.reports import evidence
from sequencer.reports.reading import StoreReader
from sequencer.results.series import StepsReader, read_series
from sequencer.store import Store
from sequencer.store.light_records import LightRecords
from tests.sequencer.reports.simulated_runs import RunSpec, record_run


def test_read_series_and_the_run_snapshot_name_their_protocols() -> None:
    assert typing.get_type_hints(read_series)["store"] is StepsReader
    assert typing.get_type_hints(evidence.RunSnapshot.__init__)["store"] is StoreReader
    assert typing.get_type_hints(evidence.RunSnapshot)["steps"] == Mapping[str, StepResult]
    assert typing.get_type_hints(evidence._limit_quantities)["inputs"] == Iterable[RunInput]


def test_both_store_paths_satisfy_the_protocols_and_a_partial_reader_does_not(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'r.db'}"
    with Store.open(url) as store:
        run_id = record_run(store, RunSpec(channels=2, full=False))
        assert isinstance(store, StoreReader) and isinstance(store, StepsReader)
        points = read_series(store, run_id)
    with LightRecords.open(url) as light:
        assert isinstance(light, StoreReader) and isinstance(light, StepsReader)
        assert read_series(light, run_id) == points and points  # the same points either way

    class MeasurementsOnly:
        def measurements(self, run_id: int) -> list:
            return []

    assert not isinstance(MeasurementsOnly(), StepsReader)
    assert not isinstance(MeasurementsOnly(), StoreReader)
