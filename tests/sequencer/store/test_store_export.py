"""Export rows and their csv / json / table text: the fixed columns (DESIGN.md), exact values."""

from __future__ import annotations

import csv
import io
import json
from datetime import datetime, timedelta

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sequencer.events import Measurement, MeasurementMade, StepFinished, StepStarted
from sequencer.store import EXPORT_COLUMNS, RUN_COLUMNS, export_rows, format_rows, run_rows

from .scenario import T0, finished, run_info, step_events

# DESIGN.md, "Export columns" (fixed, in this order)
DESIGN_TEXT = (
    "run_id, started_at, procedure, procedure_version, procedure_sha256, bench, board, channel, "
    "output, aggressor, quantity, value, uncertainty, unit, low, high, verdict"
)
DESIGN_COLUMNS = DESIGN_TEXT.split(", ")
# then (issue 15) the decision rule's qualifier and the reason a value is empty, after DESIGN's
EXPORT_TAIL = ["qualifier", "reason"]

AWKWARD = [
    Measurement("gain", 0.1 + 0.2, "V/V", 1 / 3, 1, "x1", None, 0.95, 1.05, "pass"),
    Measurement("crosstalk_pct", 5e-324, "%", None, 2, "x5", 3, None, 1.0, "pass"),  # subnormal
    Measurement("offset_mV", -0.0, "mV", 1e-300, 8, "shaped", None, -5.0, 5.0, "pass"),
    Measurement(
        "leakage_nA", 8.4e12, "nA", 1.7976931348623157e308, None, None, None, None, None, "info"
    ),
    Measurement("inl_pct", 2.5, "%", None, 4, "x1", None, None, 1.0, "fail"),
]


def _same_double(got: float, sent: float) -> bool:
    """Bit-identical, except that a SQLite table keeps -0.0 as 0.0 (observed with SQLite 3.40: an
    integral REAL is stored as an integer): equal as numbers, the sign of zero is lost."""
    return got.hex() == sent.hex() or (got == sent == 0.0)


def _run_with(
    store, measurements, *, board="NR-PA8-0001", procedure="pa8-gain", at=T0, status="completed"
):
    run_id = store.create_run(run_info(board, procedure=procedure), at)
    store.handle(StepStarted(run_id, "m", "scan", 0, 1, at))
    for m in measurements:
        store.handle(MeasurementMade(run_id, "m", m))
    store.handle(StepFinished(run_id, "m", "scan", "completed", at, at))
    store.handle(finished(run_id, status, "" if status == "completed" else "operator", at))
    return run_id


def test_export_columns_are_exactly_those_of_design_md():
    assert list(EXPORT_COLUMNS) == DESIGN_COLUMNS + EXPORT_TAIL
    # DESIGN.md's six, in order, then what `runs` adds (issue 20): verdict, operator, batch
    assert RUN_COLUMNS == ("id", "procedure", "board", "status", "start", "end", "verdict", "operator", "batch")


def test_export_rows_carry_the_run_and_the_measurement(store):
    run_id = _run_with(store, AWKWARD)
    rows = export_rows(store, run_id=run_id)
    assert [list(r) for r in rows] == [DESIGN_COLUMNS + EXPORT_TAIL] * len(AWKWARD)
    first = rows[0]
    info = run_info()
    assert first["run_id"] == run_id
    assert first["started_at"] == "2025-03-04T09:30:00.250000+00:00"  # ISO 8601, UTC
    assert datetime.fromisoformat(first["started_at"]) == T0
    assert (first["procedure"], first["procedure_version"], first["procedure_sha256"]) == (
        info.procedure, info.procedure_version, info.procedure_sha256,
    )  # fmt: skip
    assert (first["bench"], first["board"], first["verdict"]) == ("bench-2", "NR-PA8-0001", "pass")
    assert [r["aggressor"] for r in rows] == [None, 3, None, None, None]


def test_csv_round_trips_every_value_exactly(store):
    run_id = _run_with(store, AWKWARD)
    text = format_rows(export_rows(store, run_id=run_id), "csv", EXPORT_COLUMNS)
    parsed = list(csv.DictReader(io.StringIO(text)))
    assert list(parsed[0]) == DESIGN_COLUMNS + EXPORT_TAIL
    for row, m in zip(parsed, AWKWARD, strict=True):
        for name in ("value", "uncertainty", "low", "high"):
            sent = getattr(m, name)
            if sent is None:
                assert row[name] == ""  # empty field: empty string in CSV (DESIGN.md)
            else:  # repr is the shortest text that reads back to the same IEEE 754 double
                assert _same_double(float(row[name]), sent)
        assert row["channel"] == ("" if m.channel is None else str(m.channel))
        assert row["output"] == (m.output or "")


def test_json_round_trips_every_value_exactly_with_nulls(store):
    run_id = _run_with(store, AWKWARD)
    parsed = json.loads(format_rows(export_rows(store, run_id=run_id), "json", EXPORT_COLUMNS))
    assert [list(o) for o in parsed] == [DESIGN_COLUMNS + EXPORT_TAIL] * len(AWKWARD)
    for obj, m in zip(parsed, AWKWARD, strict=True):
        for name in ("value", "uncertainty", "low", "high", "channel", "output", "aggressor"):
            sent = getattr(m, name)
            assert obj[name] == sent  # None -> null (DESIGN.md)
            if isinstance(sent, float):
                assert _same_double(float(obj[name]), sent)


@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1, max_size=5))
def test_any_finite_double_survives_store_and_csv(sqlite_url, values):
    from sequencer.store import Store

    with Store.open(sqlite_url) as store:
        ms = [Measurement("gain", v, "V/V", abs(v), 1, "x1") for v in values]
        run_id = _run_with(store, ms)
        parsed = list(
            csv.DictReader(
                io.StringIO(format_rows(export_rows(store, run_id=run_id), "csv", EXPORT_COLUMNS))
            )
        )
    assert all(_same_double(float(r["value"]), v) for r, v in zip(parsed, values, strict=True))


def test_nan_is_exported_empty_and_infinity_as_text_or_null(store):
    run_id = _run_with(store, [Measurement("gain", float("nan"), "V/V", float("inf"), 1, "x1")])
    rows = export_rows(store, run_id=run_id)
    [row] = list(csv.DictReader(io.StringIO(format_rows(rows, "csv", EXPORT_COLUMNS))))
    assert (row["value"], row["uncertainty"]) == ("", "inf")
    [obj] = json.loads(format_rows(rows, "json", EXPORT_COLUMNS))  # strict JSON: no NaN / Infinity
    assert (obj["value"], obj["uncertainty"]) == (None, None)


def test_export_filters_by_run_board_procedure_and_date_range(store):
    day = timedelta(days=1)
    m = [Measurement("gain", 1.0, "V/V")]
    a = _run_with(store, m, board="NR-PA8-0001", at=T0)
    b = _run_with(store, m, board="NR-PA8-0002", at=T0 + day)
    c = _run_with(store, m, board="NR-PA8-0001", procedure="pa8-noise", at=T0 + 2 * day)
    ids = lambda **kw: [r["run_id"] for r in export_rows(store, **kw)]  # noqa: E731
    assert ids() == [a, b, c]
    assert ids(run_id=b) == [b]
    assert ids(board="NR-PA8-0001") == [a, c]
    assert ids(procedure="pa8-noise") == [c]
    assert ids(board="NR-PA8-0001", procedure="pa8-gain") == [a]
    assert ids(since=T0 + day) == [b, c]  # since inclusive
    assert ids(until=T0 + day) == [a]  # until exclusive
    assert ids(since=T0 + day, until=T0 + 2 * day) == [b]
    assert ids(run_id=a, board="NR-PA8-0002") == []


def test_export_keeps_the_order_of_recording_within_a_run(store):
    run_id = store.create_run(run_info(), T0)
    for k in range(3):
        for e in step_events(run_id, f"scan/{k}", n_measurements=4, seed=k):
            store.handle(e)
    values = [r["value"] for r in export_rows(store, run_id=run_id)]
    assert values == [m.value for m in store.measurements(run_id=run_id)]
    assert len(values) == 12


def test_runs_rows_in_every_format(store):
    done = _run_with(store, [], at=T0)
    aborted = _run_with(store, [], at=T0 + timedelta(hours=1), status="aborted")
    rows = run_rows(store.list_runs())
    assert [(r["id"], r["status"]) for r in rows] == [(done, "completed"), (aborted, "aborted")]
    table = format_rows(rows, "table", RUN_COLUMNS).splitlines()
    assert table[0].split() == list(RUN_COLUMNS)
    assert set(table[1]) <= {"-", " "}
    assert table[3].split()[3] == "aborted"
    parsed = list(csv.DictReader(io.StringIO(format_rows(rows, "csv", RUN_COLUMNS))))
    assert parsed[0]["start"] == T0.isoformat()
    assert json.loads(format_rows(rows, "json", RUN_COLUMNS))[1]["end"].endswith("+00:00")


def test_unknown_format_is_refused():
    with pytest.raises(ValueError, match="unknown format 'xml'"):
        format_rows([], "xml", EXPORT_COLUMNS)  # type: ignore[arg-type]


def test_empty_export_has_a_header_only():
    assert format_rows([], "csv", EXPORT_COLUMNS) == ",".join(DESIGN_COLUMNS + EXPORT_TAIL) + "\n"
    assert json.loads(format_rows([], "json", EXPORT_COLUMNS)) == []
