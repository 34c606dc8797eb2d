"""Shortcuts the engine takes on its hot path agree with the plain definitions they replace.

The capture handler names a driver's trace field by field (``named_capture``); it must agree with
``dataclasses.replace`` (Python standard library) on every field of ``Trace``, so a field added to
the record is never silently dropped on its way to the store.  ``hazard_steps`` looks at the kinds
once per plan; it must pick the steps ``is_hazard`` picks one by one."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from drivers.trace import Trace
from sequencer.engine.steps.scope import RAILS_META, named_capture, with_rails


def _every_field_set() -> Trace:
    """A trace whose every field holds a value that differs from its default."""
    values = {
        "volts": np.array([0.1, -0.2, 0.3]),
        "dt_s": 2e-9,
        "t0_s": -5e-8,
        "source": "CHAN3",
        "averages": 16,
        "meta": {"probe": "x10"},
        "name": "captured-as",
        "labels": {"captured": True},
        "path": "old/step",
    }
    missing = {f.name for f in dataclasses.fields(Trace)} - set(values)
    assert not missing, f"give the new Trace field(s) {sorted(missing)} a value here"
    return Trace(**values)


@pytest.mark.parametrize("rails", [None, (-50.0, 50.0)])
def test_named_capture_equals_replace_on_every_field(rails: tuple[float, float] | None) -> None:
    trace = _every_field_set()
    labels = {"channel": 2, "output": "x5", "amp": 25.0}
    fast = named_capture(trace, "pulse", labels, rails)
    slow = dataclasses.replace(with_rails(trace, rails), name="pulse", labels=labels)
    for f in dataclasses.fields(Trace):
        a, b = getattr(fast, f.name), getattr(slow, f.name)
        if isinstance(a, np.ndarray):
            assert a is b  # the samples are shared, not copied
        else:
            assert a == b, f.name
    assert (RAILS_META in fast.meta) == (rails is not None)
    assert trace.meta == {"probe": "x10"}  # the driver's trace is left as it was


def test_hazard_steps_are_the_steps_is_hazard_names() -> None:
    """``hazard_steps`` looks at the kinds once per plan; it must pick exactly the steps
    ``is_hazard`` picks one by one: every shipped kind, plus a step that declares its own hazard."""
    from dataclasses import replace as copy_with

    from sequencer.engine.preflight import hazard_steps, is_hazard
    from sequencer.procedure.kinds import KINDS
    from tests.sequencer.engine.plans import plan, step

    steps = [step(f"s/{i}", kind) for i, kind in enumerate(sorted(KINDS))]
    steps.append(copy_with(step("s/declared", "wait", seconds=0.0), hazard=True))
    p = plan(steps)
    picked = hazard_steps(p)
    assert picked == [s for s in p.steps if is_hazard(s)]
    assert any(s.path == "s/declared" for s in picked)
    assert any(KINDS[s.kind].hazard for s in picked)  # some shipped kind is a hazard
