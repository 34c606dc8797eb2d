"""The decision rule's qualifier and the refusal reason are kept per measurement (store revision 0006)
and reach every reader: the store's records, export (CSV, JSON), the open formats (Parquet read
back with pyarrow, ROOT read back with uproot), ``sequencer.results`` and the resume replay.

Outside references: the qualifier is ILAC-G8:09/2019's case of a value whose interval straddles
the limit (here 0.61 ± 2·0.02 mV against 0.6 mV); the readers are the reference libraries.
"""

from __future__ import annotations

import csv
import dataclasses
import io
import json
from pathlib import Path

import pytest
import sqlalchemy as sa

from sequencer.events import Measurement, MeasurementMade, StepFinished, StepStarted
from sequencer.store import EXPORT_COLUMNS, Store, export_rows, format_rows
from sequencer.store.connect import open_engine
from sequencer.store.migrate import current_revisions, head_revision, upgrade_to

from .scenario import T0, finished, run_info

REASON = "no pulse above 5 σ of the baseline noise (8 of 8 captures)"
NEAR = Measurement("noise_in_mV", 0.61, "mV", 0.02, 1, "x1", None, None, 0.6, "fail",
                   qualifier="within uncertainty")  # fmt: skip
DEAD = Measurement("gain", float("nan"), "V/V", None, 3, "x5", None, 4.75, 5.25, "fail",
                   reason=REASON)  # fmt: skip
CLEAR = Measurement("noise_in_mV", 0.31, "mV", 0.02, 2, "x1", None, None, 0.6, "pass")
SENT = (NEAR, DEAD, CLEAR)


def _record(store: Store) -> int:
    run_id = store.create_run(run_info(), T0)
    store.handle(StepStarted(run_id, "m", "analyse.noise", 0, 1, T0))
    for m in SENT:
        store.handle(MeasurementMade(run_id, "m", m))
    store.handle(StepFinished(run_id, "m", "analyse.noise", "completed", T0, T0))
    store.handle(finished(run_id))
    return run_id


def test_qualifier_and_reason_are_stored_and_replayed(store):
    run_id = _record(store)
    stored = store.measurements(run_id=run_id)
    assert [(m.qualifier, m.reason) for m in stored] == [
        ("within uncertainty", ""), ("", REASON), ("", "")
    ]
    # one record type both ways (sequencer.records): a NaN reads back as NaN, its reason beside it
    assert not stored[1].measured and stored[1].value != stored[1].value  # IEEE 754: NaN != NaN
    assert [m.measured for m in stored] == [True, False, True]
    assert all((m.run_id, m.path) == (run_id, "m") for m in stored)
    same = [dataclasses.replace(m, run_id=None, path="") for m in stored]
    assert [repr(m) for m in same] == [repr(m) for m in SENT]  # repr: NaN compares unequal
    # ... while the database keeps a missing value as SQL NULL (the store's one boundary)
    with store.engine.connect() as conn:
        values = conn.execute(sa.text("SELECT value FROM measurements WHERE run_id = :r ORDER BY id"),
                              {"r": run_id}).scalars().all()
    assert values == [0.61, None, 0.31]


def test_export_carries_qualifier_and_reason(store):
    run_id = _record(store)
    rows = export_rows(store, run_id=run_id)
    parsed = list(csv.DictReader(io.StringIO(format_rows(rows, "csv", EXPORT_COLUMNS))))
    assert [(r["verdict"], r["qualifier"], r["reason"]) for r in parsed] == [
        ("fail", "within uncertainty", ""), ("fail", "", REASON), ("pass", "", "")
    ]
    assert parsed[1]["value"] == ""
    objs = json.loads(format_rows(rows, "json", EXPORT_COLUMNS))
    assert [(o["qualifier"], o["reason"]) for o in objs] == [
        ("within uncertainty", ""), ("", REASON), ("", "")
    ]


def test_open_formats_and_results_carry_qualifier_and_reason(tmp_path: Path):
    pq = pytest.importorskip("pyarrow.parquet")
    pytest.importorskip("uproot")
    from sequencer import results
    from sequencer.results.formats import read_root, write_parquet, write_root
    from sequencer.results.tables import Selection, read_table

    url = f"sqlite:///{tmp_path / 'r.db'}"
    with Store.open(url) as store:
        run_id = _record(store)
        table = read_table(store, "measurements", Selection(run_id=run_id))
    write_parquet(table, tmp_path / "m.parquet")
    write_root([table], tmp_path / "m.root")
    back = pq.read_table(tmp_path / "m.parquet").to_pylist()  # reference reader: pyarrow
    root = read_root(tmp_path / "m.root", "measurements")  # written and read with uproot
    want = [(m.qualifier, m.reason) for m in SENT]
    assert [(r["qualifier"], r["reason"]) for r in back] == want
    assert list(zip(root["qualifier"], root["reason"], strict=True)) == want
    df = results.measurements(url, run=run_id)
    assert list(zip(df["qualifier"], df["reason"], strict=True)) == want


def test_rows_recorded_before_0006_read_empty(db_url):
    # rows recorded, the schema taken back to 0005 (no such columns), then opened by this version:
    # the upgrade gives the old rows the columns' default, empty (no qualifier, no reason)
    from alembic import command

    from sequencer.store.connect import writer
    from sequencer.store.migrate import _config

    engine = open_engine(db_url)
    try:
        upgrade_to(engine)
        run_id = _record(Store(engine))  # the constructor does not migrate
        with writer(engine).begin() as conn:
            command.downgrade(_config(conn), "0005")
        with engine.connect() as conn:
            assert current_revisions(conn) == ("0005",)
            cols = {c["name"] for c in sa.inspect(conn).get_columns("measurements")}
        assert not {"qualifier", "reason"} & cols
    finally:
        engine.dispose()
    with Store.open(db_url) as store:
        with store.engine.connect() as conn:
            assert current_revisions(conn) == (head_revision(),)
        stored = store.measurements(run_id=run_id)
        assert [(m.qualifier, m.reason) for m in stored] == [("", "")] * len(SENT)
