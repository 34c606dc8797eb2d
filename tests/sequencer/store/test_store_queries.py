"""Queries for reports and trends: series over time, batches, latest qualification, index use."""

from __future__ import annotations

from datetime import timedelta

import pytest

from sequencer.events import Measurement, MeasurementMade, StepFinished, StepStarted

from .scenario import T0, finished, run_info

WEEK = timedelta(days=7)


def _run(store, board, at, values, *, status="completed", procedure="pa8-gain", batch="NR-B07"):
    """A run with gain on channels 1-2, outputs x1/x5, plus a board-level leakage value."""
    run_id = store.create_run(run_info(board, procedure=procedure, batch=batch), at)
    store.handle(StepStarted(run_id, "g", "scan", 0, 1, at))
    for (channel, output), v in values.items():
        verdict = "pass" if 0.95 <= v <= 1.05 else "fail"
        m = Measurement("gain", v, "V/V", 0.002, channel, output, None, 0.95, 1.05, verdict)
        store.handle(MeasurementMade(run_id, "g", m))
    store.handle(MeasurementMade(run_id, "g", Measurement("leakage_nA", 8.4, "nA")))
    store.handle(StepFinished(run_id, "g", "scan", "completed", at, at))
    store.handle(finished(run_id, status, "" if status == "completed" else "operator", at))
    return run_id


def _values(k: float) -> dict[tuple[int, str], float]:
    return {(1, "x1"): 1.00 + k, (1, "x5"): 5.0 + k, (2, "x1"): 0.99 + k}


def test_quantity_series_is_ordered_by_time_over_completed_runs_only(store):
    late = _run(store, "NR-PA8-0001", T0 + 2 * WEEK, _values(0.02))
    early = _run(store, "NR-PA8-0001", T0, _values(0.0))  # recorded later, started earlier
    _run(store, "NR-PA8-0001", T0 + WEEK, _values(0.01), status="aborted")
    _run(store, "NR-PA8-0002", T0 + WEEK, _values(0.5))
    series = store.quantity_series("NR-PA8-0001", "gain", channel=1, output="x1")
    assert [(p.run_id, p.started_at, p.value) for p in series] == [
        (early, T0, 1.00), (late, T0 + 2 * WEEK, 1.02),
    ]  # fmt: skip
    assert (series[0].low, series[0].high, series[0].verdict, series[0].uncertainty) == (
        0.95,
        1.05,
        "pass",
        0.002,
    )
    assert len(store.quantity_series("NR-PA8-0001", "gain")) == 6  # every channel and output
    assert [p.output for p in store.quantity_series("NR-PA8-0001", "gain", channel=1)] == [
        "x1",
        "x5",
    ] * 2
    assert [p.channel for p in store.quantity_series("NR-PA8-0001", "leakage_nA")] == [None, None]
    assert store.quantity_series("NR-PA8-0001", "gain", procedure="pa8-noise") == []


def test_latest_qualification_per_board(store):
    _run(store, "NR-PA8-0001", T0, _values(0.0))
    newest = _run(store, "NR-PA8-0001", T0 + WEEK, _values(0.0))
    _run(store, "NR-PA8-0001", T0 + 2 * WEEK, _values(0.0), status="aborted")
    assert store.latest_qualification("NR-PA8-0001").id == newest
    assert store.latest_qualification("NR-PA8-0001").instruments  # the whole record
    assert store.latest_qualification("NR-PA8-0001", procedure="pa8-noise") is None
    assert store.latest_qualification("NR-PA8-9999") is None


def test_runs_of_a_batch_and_list_filters(store):
    a = _run(store, "NR-PA8-0001", T0, _values(0.0), batch="NR-B07")
    b = _run(store, "NR-PA8-0002", T0 + WEEK, _values(0.0), batch="NR-B07", status="aborted")
    c = _run(
        store, "NR-PA8-0003", T0 + 2 * WEEK, _values(0.0), batch="NR-B08", procedure="pa8-noise"
    )
    assert [r.id for r in store.runs_of_batch("NR-B07")] == [a, b]
    assert [r.id for r in store.list_runs()] == [a, b, c]
    assert [r.id for r in store.list_runs(status="aborted")] == [b]
    assert [r.id for r in store.list_runs(procedure="pa8-noise")] == [c]
    assert [r.id for r in store.list_runs(board="NR-PA8-0002")] == [b]
    assert [r.id for r in store.list_runs(since=T0 + WEEK, until=T0 + 2 * WEEK)] == [b]
    assert store.list_runs(batch="NR-B99") == []


def test_measurements_carry_their_step_path(store):
    run_id = _run(store, "NR-PA8-0001", T0, _values(0.0))
    ms = store.measurements(board="NR-PA8-0001")
    assert {m.path for m in ms} == {"g"} and {m.run_id for m in ms} == {run_id}
    assert [m.quantity for m in ms] == ["gain"] * 3 + ["leakage_nA"]


def test_trend_query_uses_the_indexes(sqlite_url):
    # SQLite "EXPLAIN QUERY PLAN" (sqlite.org/eqp.html): SEARCH ... USING INDEX, no full SCAN
    from sequencer.store import Store
    from sequencer.store.queries import quantity_series

    with Store.open(sqlite_url) as store:
        for k in range(3):
            _run(store, f"NR-PA8-000{k}", T0 + k * WEEK, _values(0.0))
        with store.engine.connect() as conn:
            conn.exec_driver_sql("ANALYZE")
            plan = []

            def _capture(conn_, cursor, statement, parameters, context, executemany):
                if statement.lstrip().startswith("SELECT") and "measurements" in statement:
                    rows = cursor.connection.execute("EXPLAIN QUERY PLAN " + statement, parameters)
                    plan.extend(r[3] for r in rows)

            from sqlalchemy import event

            event.listen(conn, "after_cursor_execute", _capture)
            quantity_series(conn, board="NR-PA8-0001", quantity="gain", channel=1, output="x1")
    text = "\n".join(plan)
    assert "ix_runs_board_started" in text, text
    assert "ix_measurements_run_quantity" in text, text
    assert not any(line.startswith("SCAN") for line in plan), text


@pytest.mark.parametrize("n_runs", [30])
def test_series_of_many_weekly_runs(store, n_runs):
    ids = [
        _run(store, "NR-PA8-0001", T0 + k * WEEK, {(1, "x1"): 1.0 + k / 1000})
        for k in range(n_runs)
    ]
    series = store.quantity_series("NR-PA8-0001", "gain", channel=1, output="x1")
    assert [p.run_id for p in series] == ids
    assert [p.value for p in series] == [1.0 + k / 1000 for k in range(n_runs)]
