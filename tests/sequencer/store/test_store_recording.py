"""Recording a run from the runner's events: provenance, one transaction per step, append-only."""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
import sqlalchemy as sa

from sequencer.errors import StoreError
from sequencer.events import Measurement, MeasurementMade, StepFinished, StepStarted, TraceCaptured
from sequencer.store import Store

from .scenario import PROCEDURE_TEXT, T0, finished, run_info, safety, step_events


def _record(store: Store, events) -> None:
    for e in events:
        store.handle(e)


def test_run_provenance_is_stored_complete(store):
    info = run_info()
    run_id = store.create_run(info, T0)
    run = store.get_run(run_id)
    assert run.to_info() == info  # every field the engine gave, including instruments and texts
    assert (run.status, run.started_at, run.ended_at, run.reason) == ("running", T0, None, "")
    # FIPS 180-4 SHA-256 via hashlib: the stored text is the text that was hashed
    assert hashlib.sha256(run.procedure_text.encode()).hexdigest() == run.procedure_sha256
    assert run.instruments[0].calibration_due == "2027-06-30"
    assert run.host and run.pid > 0


def test_procedure_text_is_stored_once_for_many_runs(store):
    ids = [store.create_run(run_info(f"NR-PA8-000{k}"), T0) for k in range(3)]
    with store.engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM documents")).scalar() == 2  # proc + bench
    assert {store.get_run(i).procedure_text for i in ids} == {PROCEDURE_TEXT}


def test_completed_step_keeps_settings_results_traces_and_measurements(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/x1", index=4, n_measurements=5, n_traces=2, seed=3))
    [step] = store.completed_steps(run_id).values()
    expected = step_events(run_id, "scan/x1", index=4, n_measurements=5, n_traces=2, seed=3)
    sent_traces = [e for e in expected if isinstance(e, TraceCaptured)]
    sent_ms = [e.measurement for e in expected if isinstance(e, MeasurementMade)]
    assert (step.path, step.kind, dict(step.settings), dict(step.results)) == (
        "scan/x1", "scan", {"amplitude_mV": 100.0}, {"points": 4},
    )  # fmt: skip
    assert [m.value for m in step.measurements] == [m.value for m in sent_ms]
    for got, sent in zip(step.traces, sent_traces, strict=True):
        assert got.volts.dtype == np.float64
        np.testing.assert_array_equal(got.volts, sent.samples)  # bit-exact, not approximately
        assert (got.dt_s, got.t0_s, got.source, got.averages) == (1e-9, -20e-9, "CHAN1", 16)
        assert dict(got.labels) == dict(sent.labels)
    assert [s.status for s in store.steps(run_id)] == ["completed"]
    assert store.steps(run_id)[0].position == 4


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.int16])
def test_trace_dtype_is_kept_as_captured(store, dtype):
    run_id = store.create_run(run_info(), T0)
    samples = (np.arange(-500, 500) * 7).astype(dtype)
    _record(store, [StepStarted(run_id, "cap", "capture", 0, 1, T0)])
    _record(store, [TraceCaptured(run_id, "cap", "raw", samples, 2e-9, 0.0)])
    _record(store, [StepFinished(run_id, "cap", "capture", "completed", T0, T0)])
    [trace] = store.traces(run_id)
    assert trace.volts.dtype == dtype
    np.testing.assert_array_equal(trace.volts, samples)


def test_traces_are_selected_by_path_prefix(store):
    run_id = store.create_run(run_info(), T0)
    for path in ("gain/x1", "gain/x5", "noise/x1", "gain_extra/x1"):
        _record(store, step_events(run_id, path))
    assert [t.path for t in store.traces(run_id, "gain/")] == ["gain/x1", "gain/x5"]
    assert len(store.traces(run_id)) == 4


def test_failed_step_is_recorded_without_its_results_and_can_be_retried(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0", status="completed"))
    _record(store, step_events(run_id, "scan/1", status="failed", n_measurements=4))
    assert set(store.completed_steps(run_id)) == {"scan/0"}
    assert [(s.path, s.status, s.error) for s in store.steps(run_id)] == [
        ("scan/0", "completed", ""), ("scan/1", "failed", "scope did not trigger"),
    ]  # fmt: skip
    assert len(store.measurements(run_id=run_id)) == 3  # only scan/0's
    _record(store, step_events(run_id, "scan/1", status="completed"))  # the retry on resume
    assert set(store.completed_steps(run_id)) == {"scan/0", "scan/1"}
    assert len(store.measurements(run_id=run_id)) == 6


def test_replayed_and_skipped_steps(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0"))
    _record(
        store, step_events(run_id, "scan/0", status="replayed")
    )  # resume replays it: no 2nd row
    _record(store, step_events(run_id, "scan/1", status="skipped"))
    assert [(s.path, s.status) for s in store.steps(run_id)] == [
        ("scan/0", "completed"), ("scan/1", "skipped"),
    ]  # fmt: skip
    assert len(store.measurements(run_id=run_id)) == 3


def test_a_step_completes_only_once(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0"))
    with pytest.raises(StoreError, match=r"StepFinished of run \d+ step scan/0"):
        _record(store, step_events(run_id, "scan/0"))
    assert len(store.measurements(run_id=run_id)) == 3  # the refused step wrote nothing


def test_safety_events_are_written_at_once(db_url, store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "bias/up")[:-1])  # the step has not finished
    store.handle(safety(run_id, "bias/up", "ramp_start"))
    store.handle(safety(run_id, "bias/up", "interlock", T0 + timedelta(seconds=1)))
    with Store.open(db_url) as other:  # another process's view: already committed
        events = other.safety_events(run_id)
        assert other.completed_steps(run_id) == {}
    assert [(e.kind, e.detail["volts"]) for e in events] == [
        ("ramp_start", 42.0),
        ("interlock", 42.0),
    ]


def test_run_finished_records_status_end_and_reason_with_an_audit_entry(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0"))
    store.handle(finished(run_id, "aborted", "interlock opened"))
    run = store.get_run(run_id)
    assert (run.status, run.reason, run.ended_at) == (
        "aborted",
        "interlock opened",
        T0 + timedelta(minutes=5),
    )
    [entry] = store.audit_trail(run_id)
    assert (entry.kind, entry.detail["from"], entry.detail["to"]) == (
        "finished",
        "running",
        "aborted",
    )


def test_a_completed_run_is_never_modified(store):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0"))
    store.handle(finished(run_id))
    with pytest.raises(StoreError, match="completed and is never modified"):
        store.handle(finished(run_id, "aborted", "late"))
    with pytest.raises(StoreError, match="completed and is never modified"):
        store.reopen_run(run_id)
    with pytest.raises(StoreError, match="the run is completed"):  # database guard (trigger)
        _record(store, step_events(run_id, "scan/9"))
    store.add_note(run_id, "x5 output noisy on channel 3, within limits", "k.berg")  # an addition
    assert [n.author for n in store.notes(run_id)] == ["k.berg"]
    assert store.get_run(run_id).status == "completed"


@pytest.mark.parametrize(
    "statement",
    [
        "UPDATE runs SET board = 'NR-PA8-9999'",
        "UPDATE runs SET status = 'aborted'",
        "DELETE FROM runs",
        "UPDATE measurements SET value = 0",
        "DELETE FROM measurements",
        "UPDATE steps SET status = 'failed'",
        "DELETE FROM traces",
        "UPDATE annotations SET text = 'edited'",
        "DELETE FROM safety_events",
    ],
)
def test_the_database_refuses_changes_to_stored_results(store, statement):
    run_id = store.create_run(run_info(), T0)
    _record(store, step_events(run_id, "scan/0"))
    store.handle(safety(run_id, "scan/0"))
    store.handle(finished(run_id))
    store.add_note(run_id, "ok", "k.berg")
    with pytest.raises(sa.exc.DatabaseError, match="benchwright"), store.engine.begin() as conn:
        conn.execute(sa.text(statement))


def test_provenance_of_a_running_run_cannot_change_either(store):
    run_id = store.create_run(run_info(), T0)
    with pytest.raises(sa.exc.DatabaseError, match="provenance"), store.engine.begin() as conn:
        conn.execute(
            sa.text("UPDATE runs SET operator = 'someone else' WHERE id = :r"), {"r": run_id}
        )


def test_times_must_be_aware_and_are_kept_in_utc(store):
    with pytest.raises(StoreError, match="naive datetime"):
        store.create_run(run_info(), datetime(2025, 3, 4, 9, 30))
    cet = timezone(timedelta(hours=1))
    run_id = store.create_run(run_info(), datetime(2025, 3, 4, 10, 30, 0, 250000, tzinfo=cet))
    assert store.get_run(run_id).started_at == T0
    assert store.get_run(run_id).started_at.utcoffset() == timedelta(0)


def test_numpy_scalars_and_nan_are_stored_plainly(store):
    run_id = store.create_run(run_info(), T0)
    m = Measurement(
        "gain", np.float32(1.5), "V/V", np.float64("nan"), np.int64(2), "x5", None, None, None
    )
    _record(store, [StepStarted(run_id, "s", "scan", 0, 1, T0), MeasurementMade(run_id, "s", m)])
    settings = {"amps": np.array([1.0, 2.0]), "n": np.int32(3), "gap": float("inf")}
    _record(store, [StepFinished(run_id, "s", "scan", "completed", T0, T0, settings)])
    [got] = store.measurements(run_id=run_id)
    assert (got.value, got.uncertainty, got.channel, got.verdict) == (1.5, None, 2, "info")
    assert dict(store.completed_steps(run_id)["s"].settings) == {
        "amps": [1.0, 2.0],
        "n": 3,
        "gap": None,
    }


def test_object_arrays_are_never_pickled(store):
    run_id = store.create_run(run_info(), T0)
    bad = np.array([{"a": 1}], dtype=object)
    _record(
        store,
        [
            StepStarted(run_id, "s", "scan", 0, 1, T0),
            TraceCaptured(run_id, "s", "t", bad, 1.0, 0.0),
        ],
    )
    with pytest.raises(StoreError, match="numeric"):
        store.handle(StepFinished(run_id, "s", "scan", "completed", T0, T0))
    assert store.steps(run_id) == []  # the transaction was rolled back
