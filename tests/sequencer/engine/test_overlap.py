"""An analysis computes while the next instrument steps run (sequencer/engine/overlap.py).

The analyses here are stand-ins that wait for a signal from a later step's handler: they can only
finish if that step ran while they computed, so the overlap itself is what is checked (by order
and states; every wait has a generous deadline that only a broken overlap would reach).  The
events must be those of a run that waited for each analysis, in the same order.
"""

from __future__ import annotations

import threading
from collections.abc import Callable

import pytest

from sequencer.engine import Runner, RunOptions, StepResult
from sequencer.engine.overlap import INDEPENDENT_KINDS, may_overlap
from sequencer.errors import RunAborted
from sequencer.events import Event, MeasurementMade, RunFinished, StepFinished, StepStarted
from sequencer.procedure.kinds import KINDS
from sequencer.records import Measurement

from .plans import plan, step
from .scripted import BenchState, scripted_bench

DEADLINE_S = 30.0


def _measurement(quantity: str, value: float) -> Measurement:
    return Measurement(quantity, value, "mV", None, 1, "x1", None, None, None, "info")


def _runner(steps, handlers: dict[str, Callable]) -> tuple[Runner, list[Event]]:
    events: list[Event] = []
    runner = Runner(plan(steps), scripted_bench(BenchState()), run_id=3,
                    subscribers=[events.append], options=RunOptions(operator="tester"))  # fmt: skip
    runner.handlers = {**runner.handlers, **handlers}
    return runner, events


def _trail(events: list[Event]) -> list[tuple[str, str]]:
    """(event type, step path or quantity) in emitted order."""
    out = []
    for e in events:
        if isinstance(e, StepStarted | StepFinished):
            out.append((type(e).__name__, e.path))
        elif isinstance(e, MeasurementMade):
            out.append(("MeasurementMade", e.measurement.quantity))
    return out


def test_every_independent_kind_is_a_step_kind() -> None:
    assert INDEPENDENT_KINDS.issubset(KINDS)
    assert not any(k.startswith(("analyse.", "bias.")) for k in INDEPENDENT_KINDS)


def test_an_analysis_computes_during_the_next_steps_and_is_recorded_first() -> None:
    gate_ran = threading.Event()
    seen_by_gate: list[bool] = []

    def analysis(ctx, s) -> StepResult:
        assert gate_ran.wait(DEADLINE_S), "the gate step never ran while the analysis computed"
        return StepResult(measurements=[_measurement("baseline_mV", 1.5)])

    def gate(ctx, s) -> StepResult:
        seen_by_gate.append(any(m.quantity == "baseline_mV" for m in ctx.measurements))
        gate_ran.set()
        return StepResult(results={"gate": 1})

    steps = [
        step("a/amp", "pulser.amplitude", mV=40.0),
        step("a/base", "analyse.baseline", traces="t", n_baseline=10),
        step("a/rate", "pulser.rate", hz=1000.0),
        step("a/gate", "switch.inject", channel=1),
        step("a/next", "analyse.noise", traces="t", n_baseline=10),
    ]
    second: list[int] = []

    def next_analysis(ctx, s) -> StepResult:  # must see the first analysis's measurement
        second.append(sum(m.quantity == "baseline_mV" for m in ctx.measurements))
        return StepResult(measurements=[_measurement("noise_mV", 0.2)])

    runner, events = _runner(
        steps, {"analyse.baseline": analysis, "switch.inject": gate, "analyse.noise": next_analysis}
    )
    outcome = runner.run()
    assert outcome.status == "completed" and outcome.measurements == 2
    assert seen_by_gate == [False]  # it ran before the analysis was published
    assert second == [1]  # a later analysis waits for the held one
    assert _trail(events) == [
        ("StepStarted", "a/amp"), ("StepFinished", "a/amp"),
        ("StepStarted", "a/base"), ("MeasurementMade", "baseline_mV"), ("StepFinished", "a/base"),
        ("StepStarted", "a/rate"), ("StepFinished", "a/rate"),
        ("StepStarted", "a/gate"), ("StepFinished", "a/gate"),
        ("StepStarted", "a/next"), ("MeasurementMade", "noise_mV"), ("StepFinished", "a/next"),
    ]  # fmt: skip
    finished = {e.path: e for e in events if isinstance(e, StepFinished)}
    assert finished["a/gate"].results == {"gate": 1}


def test_a_setting_that_follows_a_measured_baseline_waits_for_the_analysis() -> None:
    follows = step("a/in", "scope.input", input=1, range=100.0, follow_baseline=True)
    plain = step("a/in", "scope.input", input=1, range=100.0)
    assert not may_overlap(follows) and may_overlap(plain)
    assert not may_overlap(step("b/ramp", "bias.ramp", volts=5.0, rate=1.0))
    assert not may_overlap(step("c/amp", "pulser.amplitude", block="cleanup", mV=0.0))


def test_an_analysis_that_raises_aborts_at_its_own_step_and_drops_the_held_steps() -> None:
    held_ran = threading.Event()

    def broken(ctx, s) -> StepResult:
        assert held_ran.wait(DEADLINE_S)
        raise RuntimeError("analysis bug")

    def rate(ctx, s) -> StepResult:
        held_ran.set()
        return StepResult()

    steps = [
        step("a/base", "analyse.baseline", traces="t", n_baseline=10),
        step("a/rate", "pulser.rate", hz=1000.0),
        step("a/next", "analyse.noise", traces="t", n_baseline=10),
        step("end/off", "pulser.output", block="cleanup", on=False),
    ]
    runner, events = _runner(steps, {"analyse.baseline": broken, "pulser.rate": rate})
    with pytest.raises(RunAborted) as caught:
        runner.run()
    assert caught.value.step_path == "a/base"
    assert "analysis bug" in str(caught.value)
    paths = [e.path for e in events if isinstance(e, StepStarted)]
    assert paths == [
        "a/base",
        "end/off",
    ]  # a/rate ran but is not recorded: sequentially it never would
    assert isinstance(events[-1], RunFinished) and events[-1].status == "aborted"


def test_a_step_failing_while_an_analysis_is_held_aborts_there_and_loses_nothing() -> None:
    started = threading.Event()

    def analysis(ctx, s) -> StepResult:
        started.set()
        return StepResult(measurements=[_measurement("baseline_mV", 2.0)])

    def failing_rate(ctx, s) -> StepResult:
        assert started.wait(DEADLINE_S)
        raise RuntimeError("pulser fell over")

    steps = [
        step("a/base", "analyse.baseline", traces="t", n_baseline=10),
        step("a/amp", "pulser.amplitude", mV=10.0),
        step("a/rate", "pulser.rate", hz=1000.0),
        step("a/never", "pulser.output", on=True),
        step("end/off", "pulser.output", block="cleanup", on=False),
    ]
    runner, events = _runner(steps, {"analyse.baseline": analysis, "pulser.rate": failing_rate})
    with pytest.raises(RunAborted) as caught:
        runner.run()
    assert caught.value.step_path == "a/rate"
    assert _trail(events)[:8] == [
        ("StepStarted", "a/base"), ("MeasurementMade", "baseline_mV"), ("StepFinished", "a/base"),
        ("StepStarted", "a/amp"), ("StepFinished", "a/amp"),
        ("StepStarted", "a/rate"),  # started, never finished: as without the overlap
        ("StepStarted", "end/off"), ("StepFinished", "end/off"),
    ]  # fmt: skip
    assert isinstance(events[-1], RunFinished) and events[-1].status == "aborted"


def test_a_stop_while_an_analysis_is_held_still_records_it() -> None:
    def analysis(ctx, s) -> StepResult:
        return StepResult(measurements=[_measurement("baseline_mV", 3.0)])

    def amp_then_stop(ctx, s) -> StepResult:
        ctx.stop.request("operator", "stopped by the operator")
        return StepResult()

    steps = [
        step("a/base", "analyse.baseline", traces="t", n_baseline=10),
        step("a/amp", "pulser.amplitude", mV=10.0),
        step("a/rate", "pulser.rate", hz=1000.0),
    ]
    runner, events = _runner(
        steps, {"analyse.baseline": analysis, "pulser.amplitude": amp_then_stop}
    )
    with pytest.raises(RunAborted) as caught:
        runner.run()
    assert caught.value.cause == "operator"
    assert _trail(events) == [
        ("StepStarted", "a/base"), ("MeasurementMade", "baseline_mV"), ("StepFinished", "a/base"),
        ("StepStarted", "a/amp"), ("StepFinished", "a/amp"),
    ]  # fmt: skip
