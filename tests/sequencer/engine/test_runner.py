"""The runner over real drivers on scripted links: events, preflight, cleanup, resume, signals."""

from __future__ import annotations

import os
import re
import signal

import pytest

from sequencer.engine import Runner, RunOptions, StepResult, check_plan_against_bench
from sequencer.errors import RunAborted
from sequencer.events import (
    MeasurementMade,
    RunFinished,
    RunStarted,
    SafetyEvent,
    StepFinished,
    StepStarted,
)
from sequencer.procedure.plan_model import Limit

from .plans import plan, step
from .scripted import BenchState, scripted_bench


def run(p, bench, *, options=None, completed=None):
    events = []
    runner = Runner(
        p,
        bench,
        run_id=7,
        subscribers=[events.append],
        options=options or RunOptions(operator="tester"),
        completed=completed,
    )
    try:
        outcome = runner.run()
    except RunAborted as exc:
        return exc, events
    return outcome, events


def test_thousand_noop_steps_and_event_order():
    # their speed (issue: under a second) is the noop_steps row of tests/benchmarks/bench_engine.py
    bench = scripted_bench(BenchState())
    p = plan([step(f"idle/{i}", "wait", seconds=0.0) for i in range(1000)])
    outcome, events = run(p, bench)
    assert outcome.status == "completed" and outcome.measurements == 0
    assert isinstance(events[0], RunStarted) and isinstance(events[-1], RunFinished)
    kinds = [type(e) for e in events[1:-1]]
    assert kinds == [StepStarted, StepFinished] * 1000
    assert events[-1].status == "completed"
    assert [e.index for e in events if isinstance(e, StepStarted)][:3] == [0, 1, 2]


def test_configuring_steps_reach_the_instrument_with_error_check():
    state = BenchState()
    bench = scripted_bench(state)
    p = plan(
        [
            step("a", "pulser.amplitude", mV=40.0),
            step("r", "switch.route", channel=3, output="x5", input=1),
        ]
    )
    outcome, _ = run(p, bench)
    assert outcome.status == "completed"
    pulser = state.sent("pulser")
    # wire units are SI (generic dialect): 40 mV -> 0.04 V, then the error-queue check
    i = pulser.index("SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0.04")
    assert pulser[i + 1].startswith("SYSTem:ERRor")
    assert "ROUTe:CLOSe (@1203)" in state.sent("switch")  # 1000*i + 100*k + c, dialect header


def test_missing_role_is_a_precondition_before_anything_moves():
    state = BenchState()
    bench = scripted_bench(state, roles=("pulser",))
    p = plan(
        [step("a", "pulser.amplitude", mV=40.0), step("c", "scope.capture", inputs=[1], into=["t"])]
    )
    sent_before = len(state.log)
    exc, events = run(p, bench)
    assert isinstance(exc, RunAborted) and exc.cause == "precondition"
    assert "'scope'" in str(exc)
    assert len(state.log) == sent_before  # nothing sent
    assert events[-1].status == "aborted" and "scope" in events[-1].reason


def test_check_plan_against_bench_limits():
    bench = scripted_bench(BenchState())
    p = plan(
        [
            step("hv/up", "bias.ramp", volts=75.0, rate=20.0),
            step("hv/limit", "bias.limit", current=500.0),
        ],
        hazards=("bias",),
    )
    problems = check_plan_against_bench(p, bench.spec)
    assert any("75 V exceeds the bench limit 60 V" in s for s in problems)
    assert any("20 V/s exceeds the bench limit 10 V/s" in s for s in problems)
    assert any("500 uA exceeds" in s for s in problems)
    assert (
        check_plan_against_bench(plan([step("hv/up", "bias.ramp", volts=30.0)]), bench.spec) == []
    )
    no_bias = scripted_bench(BenchState(), roles=("pulser",))
    assert any("bias" in s for s in check_plan_against_bench(p, no_bias.spec))


def test_verdicts_count_into_the_outcome():
    bench = scripted_bench(BenchState())
    p = plan(
        [
            step("ask", "prompt", message="serial?", enter="hv"),
            step("leak", "analyse.leakage", reading="hv"),
        ],
        limits=[Limit("leakage_nA", None, 1.0, "nA")],
    )
    opts = RunOptions(prompt=lambda msg, wants: '{"volts": 1, "current_A": 2e-9}')
    # the prompt returns text, not a reading with current: the analysis fails -> NaN, verdict fail
    outcome, events = run(p, bench, options=opts)
    ms = [e.measurement for e in events if isinstance(e, MeasurementMade)]
    assert outcome.failed == 1 and outcome.measurements == 1 and ms[0].verdict == "fail"


def test_cleanup_runs_after_abort_and_its_error_does_not_hide_the_cause():
    state = BenchState()
    state.faults = [{"role": "pulser", "after_commands": 2, "kind": "disconnect"}]
    bench = scripted_bench(state)
    p = plan(
        [
            step("setup/route", "switch.route", block="setup", channel=1, output="x1", input=1),
            step("gain/amp", "pulser.amplitude", mV=10.0),
            step("cleanup/relays", "switch.open_all", block="cleanup"),
            step("cleanup/pulser", "pulser.output", block="cleanup", on=False),
        ]
    )
    exc, events = run(p, bench)
    assert isinstance(exc, RunAborted) and exc.cause == "instrument"
    text = str(exc)
    # one line: instrument role and address, command, step path
    assert "\n" not in text
    assert text.startswith("pulser at TCPIP0::127.0.0.1::")
    # the drivers retry once after reconnecting, so the command named is the one that failed last
    # the link closed on the error-queue check after the amplitude: that command is named
    assert re.search(
        r"connection closed by the instrument \(checking the error queue after '[^']+'\)", text
    )
    assert text.endswith("[step gain/amp]")
    assert "ROUTe:OPEN:ALL" in state.sent("switch")  # cleanup ran
    finished = {e.path: e for e in events if isinstance(e, StepFinished)}
    assert finished["cleanup/relays"].status == "completed"
    assert finished["cleanup/pulser"].status == "failed"
    assert events[-1].status == "aborted" and events[-1].reason == text


def test_sigterm_becomes_an_abort_with_cleanup_and_handlers_restored():
    state = BenchState()
    bench = scripted_bench(state)
    before = signal.getsignal(signal.SIGTERM)

    def send_term(message, wants):
        os.kill(os.getpid(), signal.SIGTERM)
        return ""

    p = plan(
        [
            step("ask", "prompt", message="go?"),
            step("settle", "wait", seconds=5.0),
            step("never", "pulser.amplitude", mV=1.0),
            step("cleanup/relays", "switch.open_all", block="cleanup"),
        ]
    )
    exc, events = run(p, bench, options=RunOptions(prompt=send_term))
    # the 5 s wait did not run to its end: the stop came first (order, not a wall-clock bound)
    done = [e.path for e in events if isinstance(e, StepFinished) and e.status == "completed"]
    assert done == ["ask", "cleanup/relays"]
    assert isinstance(exc, RunAborted) and exc.cause == "signal" and "SIGTERM" in str(exc)
    assert "ROUTe:OPEN:ALL" in state.sent("switch")
    assert not any("AMPLitude 0.001" in c for c in state.sent("pulser"))
    assert signal.getsignal(signal.SIGTERM) is before


def kept(kind, results=None, traces=(), measurements=()):
    """What a store keeps of a completed step: the one step-result record (sequencer.records)."""
    return StepResult(kind=kind, results=results or {}, traces=traces, measurements=measurements)


def test_resume_reapplies_configuring_steps_and_replays_readings():
    state = BenchState()
    bench = scripted_bench(state)
    p = plan(
        [
            step("setup/route", "switch.route", block="setup", channel=1, output="x1", input=1),
            step("amp", "pulser.amplitude", mV=20.0),
            step("ask", "prompt", message="reading?", enter="hv"),
            step("leak", "analyse.leakage", reading="hv"),
        ]
    )
    completed = {
        "setup/route": kept("switch.route"),
        "amp": kept("pulser.amplitude"),
        "ask": kept("prompt", results={"readings": {"hv": {"volts": 30.0, "current_A": 6e-9}}}),
    }

    def no_prompt(message, wants):
        raise AssertionError("a completed prompt must be replayed, not asked again")

    outcome, events = run(p, bench, options=RunOptions(prompt=no_prompt), completed=completed)
    statuses = {e.path: e.status for e in events if isinstance(e, StepFinished)}
    assert statuses == {
        "setup/route": "replayed",
        "amp": "replayed",
        "ask": "replayed",
        "leak": "completed",
    }
    assert "SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0.02" in state.sent("pulser")  # re-applied
    ms = [e.measurement for e in events if isinstance(e, MeasurementMade)]
    assert [m.value for m in ms] == [pytest.approx(6.0)]  # from the replayed reading
    assert outcome.measurements == 1


def test_resume_refuses_a_changed_step_kind():
    bench = scripted_bench(BenchState())
    p = plan([step("amp", "pulser.amplitude", mV=20.0)])
    exc, _ = run(p, bench, completed={"amp": kept("pulser.rate")})
    assert isinstance(exc, RunAborted) and exc.cause == "precondition"


def test_safety_events_are_not_emitted_without_bias_steps():
    bench = scripted_bench(BenchState())
    _, events = run(plan([step("w", "wait", seconds=0.0)]), bench)
    assert not [e for e in events if isinstance(e, SafetyEvent)]


def test_timeout_reason_names_the_command():
    state = BenchState()
    state.faults = [{"role": "pulser", "after_commands": 2, "kind": "no_reply"}]
    bench = scripted_bench(state)
    exc, _ = run(plan([step("gain/amp", "pulser.amplitude", mV=10.0)]), bench)
    assert (
        "no reply to the error-queue check after "
        "'SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0.01' within 5000 ms" in str(exc)
    )
