"""Recording one step behind (sequencer/store/behind.py): order, the bound on the lag, what is
written at once, failures handed back, nothing lost at close; and a real store records the same
rows through it as through its synchronous ``handle``.

Assertions are on order, counts and states (no wall-clock bounds): the writer is held by a gate
the test opens, and "still blocked" is checked after a wait that the writer could only have used to
deliver, never as a time limit on the code under test.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from datetime import UTC, datetime

import pytest

from sequencer.errors import StoreError
from sequencer.events import Event, RunFinished, SafetyEvent, StepFinished, StepStarted
from sequencer.store import Store
from sequencer.store.behind import WriteBehind

from .scenario import T0, finished, run_info, step_events

RUN = 1


def _started(i: int) -> StepStarted:
    return StepStarted(run_id=RUN, path=f"steps/{i}", kind="wait", index=i, total=99, at=T0)


def _finished(i: int) -> StepFinished:
    return StepFinished(run_id=RUN, path=f"steps/{i}", kind="wait", status="completed",
                        started_at=T0, finished_at=T0)  # fmt: skip


class GatedHandle:
    """A store stand-in whose writes wait for the test to open its gate."""

    def __init__(self) -> None:
        self.seen: list[Event] = []
        self.gate = threading.Event()
        self.fail_on: str = ""

    def __call__(self, event: Event) -> None:
        self.gate.wait(30)
        if getattr(event, "path", None) == self.fail_on and isinstance(event, StepFinished):
            raise StoreError(f"cannot record StepFinished of run {RUN} step {self.fail_on}")
        self.seen.append(event)


def _in_thread(call: Callable[[], None]) -> threading.Thread:
    thread = threading.Thread(target=call, daemon=True)
    thread.start()
    return thread


def test_events_reach_the_store_in_the_order_emitted() -> None:
    handle = GatedHandle()
    handle.gate.set()
    events: list[Event] = []
    for i in range(20):
        events += [_started(i), _finished(i)]
    with WriteBehind(handle, max_behind=3) as behind:
        for event in events:
            behind(event)
    assert handle.seen == events


def test_a_step_waits_while_max_behind_steps_are_unwritten() -> None:
    handle = GatedHandle()  # gate closed: nothing gets written
    behind = WriteBehind(handle, max_behind=2)
    behind(_finished(0))
    behind(_finished(1))  # two unwritten: still allowed
    third = _in_thread(lambda: behind(_finished(2)))
    third.join(0.3)
    assert third.is_alive()  # the third completed step waits for the writer
    assert handle.seen == []
    handle.gate.set()
    third.join(30)
    assert not third.is_alive()
    behind.close()
    assert [e.path for e in handle.seen] == ["steps/0", "steps/1", "steps/2"]


@pytest.mark.parametrize(
    "urgent",
    [
        SafetyEvent(run_id=RUN, path="steps/1", kind="ramp_start", at=T0, detail={"volts": 30.0}),
        RunFinished(run_id=RUN, status="completed", at=T0),
    ],
)
def test_safety_events_and_the_end_of_the_run_are_written_before_the_call_returns(
    urgent: Event,
) -> None:
    handle = GatedHandle()
    behind = WriteBehind(handle)
    behind(_started(0))
    behind(_finished(0))
    call = _in_thread(lambda: behind(urgent))
    call.join(0.3)
    assert call.is_alive() and handle.seen == []  # held until written
    handle.gate.set()
    call.join(30)
    assert handle.seen == [_started(0), _finished(0), urgent]
    behind.close()


def test_a_failed_write_is_raised_once_by_the_next_call_and_later_events_still_arrive() -> None:
    handle = GatedHandle()
    handle.gate.set()
    handle.fail_on = "steps/1"
    behind = WriteBehind(handle, max_behind=1)
    behind(_finished(0))
    behind(_finished(1))  # fails in the writer
    with pytest.raises(StoreError, match="step steps/1"):
        behind(_finished(2))  # waits for steps/1 (max_behind=1), then hands its failure back
    end = RunFinished(run_id=RUN, status="aborted", at=T0, reason="store")
    behind(end)  # raised once only
    behind.close()
    assert [getattr(e, "path", "end") for e in handle.seen] == ["steps/0", "steps/2", "end"]


def test_close_writes_everything_queued_then_refuses_more() -> None:
    handle = GatedHandle()
    behind = WriteBehind(handle, max_behind=100)
    for i in range(10):
        behind(_finished(i))
    assert handle.seen == []
    handle.gate.set()
    behind.close()
    assert len(handle.seen) == 10
    with pytest.raises(StoreError, match="closed"):
        behind(_finished(10))


def test_a_store_records_the_same_run_behind_as_synchronously(store: Store) -> None:
    # on SQLite and PostgreSQL (the conftest's db_url): the writer thread takes its own connection
    def record(behind: bool) -> list[object]:
        run_id = store.create_run(run_info(), datetime.now(UTC))
        events: list[Event] = []
        for i in range(6):
            events += step_events(run_id, f"steps/{i}", index=i, seed=i)
        events.append(finished(run_id, "completed"))
        if behind:
            with store.writing_behind() as recorder:
                assert isinstance(recorder, WriteBehind)
                for event in events:
                    recorder(event)
        else:
            for event in events:
                store.handle(event)
        rows = [(s.path, s.status, s.position) for s in store.steps(run_id)]
        ms = [(m.path, m.quantity, m.channel, m.value) for m in store.measurements(run_id)]
        return [store.get_run(run_id).status, rows, ms]

    sync = record(behind=False)
    assert record(behind=True) == sync
    assert sync[0] == "completed" and len(sync[1]) == 6 and len(sync[2]) == 18
