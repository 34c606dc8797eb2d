"""A trace's meta -- the digitizer input's rails -- is stored with it (revision 0008, issue 16), so a
capture replayed on resume is checked for clipping as the live run checked it; a trace stored before
0008 has lost its rails and is refused with that reason, never measured unchecked.

Outside reference for "clipped": a sample at the input's range limit has lost its value (IEEE Std
1057-2017 on the digitizer's full-scale range; the threshold is ``refusals.MAX_CLIPPED_FRACTION``).
The trace here is invented: a flat baseline with 20 % of its samples at the upper rail.
"""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest

from drivers.trace import META_NOT_STORED, Trace
from sequencer.engine import Runner, RunOptions
from sequencer.engine.context import RunContext, StopFlag
from sequencer.engine.replay import result_from_store
from sequencer.engine.steps import handler_table
from sequencer.engine.steps.refusing import AnalysisRefused
from sequencer.engine.steps.scope import RAILS_META, rails_of, with_rails
from sequencer.events import MeasurementMade, StepFinished, StepStarted, TraceCaptured
from sequencer.store import Store
from sequencer.store.connect import open_engine
from sequencer.store.migrate import current_revisions, head_revision, upgrade_to
from tests.sequencer.engine.plans import plan, step
from tests.sequencer.engine.scripted import BenchState, scripted_bench

from .scenario import T0, finished, run_info

HANDLERS = handler_table()
RAILS = (-50.0, 50.0)  # mV: a 100 mV range at zero offset, as scope.input sets them
LABELS = {"channel": 1, "output": "x1"}
CAPTURE = step("noise/ch1/x1/capture", "scope.capture", labels=LABELS, inputs=[1], into=["baseline"])
NOISE = step("noise/ch1/x1/noise", "analyse.noise", labels=LABELS, traces="baseline")


def clipped_capture() -> Trace:
    """As ``scope.capture`` gives it: named, labelled, with its input's rails in its meta."""
    volts = np.full(1000, 0.001)
    volts[400:600] = RAILS[1] / 1e3  # 20 % of the samples at the upper rail
    captured = Trace(volts=volts, dt_s=1e-9, t0_s=-1e-7, source="CHAN1")
    return Trace(**{**with_rails(captured, RAILS).__dict__, "name": "baseline", "labels": LABELS})


def _ctx(traces: list[Trace]) -> RunContext:
    ctx = RunContext(plan=plan([]), bench=None, run_id=1, emit=lambda e: None,
                     options=RunOptions(), clock=lambda: datetime(2026, 1, 1, tzinfo=UTC),
                     stop=StopFlag())  # fmt: skip
    for t in traces:
        ctx.add_trace(t)
    return ctx


def _live_refusal() -> str:
    with pytest.raises(AnalysisRefused) as caught:
        HANDLERS[NOISE.kind](_ctx([clipped_capture()]), NOISE)
    return str(caught.value)


def _record_capture(store: Store) -> int:
    """The capture step recorded as the runner emits it (``Runner._absorb``: meta with the trace)."""
    t = clipped_capture()
    run_id = store.create_run(run_info(), T0)
    store.handle(StepStarted(run_id, CAPTURE.path, CAPTURE.kind, 0, 2, T0))
    store.handle(TraceCaptured(run_id, CAPTURE.path, t.name, t.volts, t.dt_s, t.t0_s, t.source,
                               t.averages, dict(t.labels), dict(t.meta)))  # fmt: skip
    store.handle(StepFinished(run_id, CAPTURE.path, CAPTURE.kind, "completed", T0, T0))
    return run_id


def test_the_live_analysis_refuses_the_clipped_capture():
    assert _live_refusal().startswith("clipped: 20 % of samples at the rail")


def test_meta_is_stored_and_the_replayed_capture_is_refused_like_the_live_one(store):
    run_id = _record_capture(store)
    [back] = store.traces(run_id)
    assert back.meta == {RAILS_META: f"{RAILS[0]!r},{RAILS[1]!r}"} and rails_of(back) == RAILS
    replayed = result_from_store(CAPTURE, store.completed_steps(run_id)[CAPTURE.path]).traces
    with pytest.raises(AnalysisRefused) as caught:
        HANDLERS[NOISE.kind](_ctx(replayed), NOISE)
    assert str(caught.value) == _live_refusal()


def test_a_resumed_run_refuses_the_replayed_clipped_capture(store):
    # the run was killed after its capture: resume replays the capture from the store (a capture
    # is not redone on resume) and runs the analysis, which gives NaN with the live run's reason
    run_id = _record_capture(store)
    events: list = []
    runner = Runner(plan([CAPTURE, NOISE]), scripted_bench(BenchState(), ("scope",)),
                    run_id=run_id, subscribers=[events.append], options=RunOptions(operator="tester"),
                    completed=store.completed_steps(run_id))  # fmt: skip
    runner.run()
    done = {e.path: e.status for e in events if isinstance(e, StepFinished)}
    assert done[CAPTURE.path] == "replayed" and NOISE.path in done  # the analysis ran on the replay
    [m] = [e.measurement for e in events if isinstance(e, MeasurementMade)]
    assert np.isnan(m.value) and m.verdict == "fail" and m.reason == _live_refusal()


def test_a_trace_stored_before_0008_is_refused_for_want_of_its_rails(db_url):
    from alembic import command

    from sequencer.store.connect import writer
    from sequencer.store.migrate import _config

    engine = open_engine(db_url)
    try:
        upgrade_to(engine)
        run_id = _record_capture(Store(engine))
        with Store(engine) as s:
            s.handle(finished(run_id))
        with writer(engine).begin() as conn:  # the schema of the release before: no traces.meta
            command.downgrade(_config(conn), "0007")
    finally:
        engine.dispose()
    with Store.open(db_url) as s:  # opening a writer upgrades: the old row's meta is NULL
        with s.engine.connect() as conn:
            assert current_revisions(conn) == (head_revision(),)
        [back] = s.traces(run_id)
        replayed = result_from_store(CAPTURE, s.completed_steps(run_id)[CAPTURE.path]).traces
    assert rails_of(back) is None and META_NOT_STORED in back.meta
    np.testing.assert_array_equal(back.volts, clipped_capture().volts)  # the samples are all kept
    with pytest.raises(AnalysisRefused, match=r"^rails unknown, cannot check for clipping: "
                                              r"stored before .*revision 0008"):
        HANDLERS[NOISE.kind](_ctx(replayed), NOISE)
