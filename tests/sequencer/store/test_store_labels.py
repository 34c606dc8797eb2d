"""A completed step's labels (channel, output, sweep values) stored as typed columns (revision 0004):
read back with their types, selectable by value in SQL, written only for completed steps."""

from __future__ import annotations

from datetime import timedelta

import pytest
import sqlalchemy as sa

from sequencer.events import StepFinished, StepStarted
from sequencer.store.migrate import current_revisions, head_revision

from .scenario import T0, run_info

LABELS = {"channel": 3, "output": "x5", "amp": 40.0, "inverted": False}


def _step(store, run_id: int, path: str, status: str, labels: dict) -> None:
    store.handle(StepStarted(run_id, path, "scope.capture", 0, 2, T0))
    store.handle(StepFinished(run_id, path, "scope.capture", status, T0, T0 + timedelta(seconds=1),
                              labels=labels, error="" if status == "completed" else "no trigger"))


def test_labels_come_back_with_their_types(store):
    run_id = store.create_run(run_info(), T0)
    _step(store, run_id, "gain/ch3/x5/amp=40mV/capture", "completed", LABELS)
    _step(store, run_id, "gain/ch3/x5/amp=60mV/capture", "failed", {**LABELS, "amp": 60.0})
    [step] = store.completed_steps(run_id).values()
    assert step.labels == LABELS
    assert [type(step.labels[k]) for k in LABELS] == [int, str, float, bool]


def test_a_sweep_value_is_a_number_column(store):
    run_id = store.create_run(run_info(), T0)
    for amp in (20.0, 40.0, 60.0):
        _step(store, run_id, f"gain/ch3/x5/amp={amp:g}mV/capture", "completed", {**LABELS, "amp": amp})
    with store.engine.connect() as conn:
        paths = conn.execute(sa.text(
            "SELECT s.path FROM step_labels l JOIN steps s ON s.id = l.step_id "
            "WHERE l.run_id = :r AND l.name = 'amp' AND l.number > 30 ORDER BY l.number"
        ), {"r": run_id}).scalars().all()
        assert paths == ["gain/ch3/x5/amp=40mV/capture", "gain/ch3/x5/amp=60mV/capture"]
        assert current_revisions(conn) == (head_revision(),)
    with pytest.raises(sa.exc.DatabaseError), store.engine.begin() as conn:
        conn.execute(sa.text("UPDATE step_labels SET number = 1"))  # append-only
