"""Bias safety over real drivers on scripted links: acknowledgement, interlock, trip, over-current,
ramp-down and read-back, UNSAFE reporting."""

from __future__ import annotations

import pytest

from sequencer.engine import Caution, Runner, RunOptions, StepResult
from sequencer.errors import RunAborted
from sequencer.events import SafetyEvent

from .plans import plan, step
from .scripted import BenchState, scripted_bench

VOLT = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"


def hv_plan(volts=5.0, *, extra=(), cleanup=()):
    return plan(
        [
            step("hv/limit", "bias.limit", current=50.0),
            step("hv/up", "bias.ramp", volts=volts, rate=5.0),
            step("hv/read", "bias.read", into="hv"),
            *extra,
            step("hv/down", "bias.ramp", volts=0.0),
            step("hv/off", "bias.output", on=False),
            *cleanup,
        ],
        hazards=("bias",),
        max_bias_volts=volts,
    )


def run(p, state, **opts):
    bench = scripted_bench(state)
    events = []
    options = RunOptions(
        operator="A. Technician", ramp_poll_s=0.001, interlock_interval_s=0.01, **opts
    )
    try:
        out = Runner(p, bench, run_id=3, subscribers=[events.append], options=options).run()
    except RunAborted as exc:
        out = exc
    return out, [e for e in events if isinstance(e, SafetyEvent)], events


def voltage_commands(state):
    return [c for c in state.sent("bias") if c.startswith(VOLT + " ")]


def test_no_terminal_and_no_yes_refuses_before_any_voltage():
    state = BenchState()
    out, _safety, _ = run(hv_plan(), state)
    assert isinstance(out, RunAborted) and out.cause == "operator"
    assert "--yes" in str(out)
    assert voltage_commands(state) == [] and "OUTPut:STATe ON" not in state.sent("bias")


def test_declined_caution_applies_no_voltage():
    state = BenchState()
    seen: list[Caution] = []
    out, safety, _ = run(hv_plan(12.0), state, acknowledge=lambda c: seen.append(c) or False)
    assert isinstance(out, RunAborted) and out.cause == "operator"
    assert seen[0].max_volts == 12.0 and seen[0].steps[0] == "hv/up"
    assert (
        "keep the enclosure closed; follow your lab's safety rules and local codes"
        in seen[0].text().lower()
    )
    assert [e.detail["mode"] for e in safety if e.kind == "acknowledgement"] == ["declined"]
    assert not any(float(c.split()[-1]) != 0.0 for c in voltage_commands(state))


def test_unattended_run_ramps_and_ends_safe():
    state = BenchState()
    out, safety, _events = run(hv_plan(), state, unattended=True)
    assert out.status == "completed"
    kinds = [e.kind for e in safety]
    ack = next(e for e in safety if e.kind == "acknowledgement")
    assert ack.detail["operator"] == "A. Technician" and ack.detail["mode"] == "unattended"
    assert kinds.index("acknowledgement") < kinds.index("ramp_start")
    assert kinds[-1] == "safe_state"
    cmds = state.sent("bias")
    # never stepped: output switched on only with the setpoint at 0, then the ramp rate, then 5 V
    on = cmds.index("OUTPut:STATe ON")
    assert all(float(c.split()[-1]) == 0.0 for c in cmds[:on] if c.startswith(VOLT + " "))
    assert cmds.index("SOURce:VOLTage:SLEW 5") < cmds.index(VOLT + " 5")
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0
    reading = next(e for e in safety if e.kind == "reading" and e.path == "hv/read")
    # I = V / R at the voltage read back (the scripted supply slews at its rate: near 5 V)
    assert reading.detail["volts"] == pytest.approx(5.0, abs=0.2)
    assert reading.detail["current_A"] == pytest.approx(reading.detail["volts"] / 5e9)


def test_interlock_open_before_the_first_hazard():
    state = BenchState()
    state.interlock_closed = False
    out, _safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "interlock" and "interlock" in str(out)
    assert voltage_commands(state) == []


def test_interlock_opening_while_live_ramps_down_and_verifies():
    state = BenchState()
    out, safety, _ = run(
        hv_plan(extra=[step("hv/soak", "wait", seconds=0.5)]),
        state,
        unattended=True,
        acknowledge=None,
    )
    assert out.status == "completed"  # control: the same plan completes with the interlock closed

    state = BenchState()

    def open_when_soaking(role, text):
        soaking = state.bias["setpoint"] == 5.0 and state.at_setpoint()  # slewed all the way
        if role == "bias" and soaking and text.startswith("SYSTem:INT"):
            state.interlock_closed = False

    state.on_query = open_when_soaking
    p = hv_plan(extra=[step("hv/soak", "wait", seconds=0.5)])
    out, safety, events = run(p, state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "interlock"
    assert "interlock" in str(out)
    cmds = state.sent("bias")
    assert cmds.index(VOLT + " 0") > cmds.index(VOLT + " 5")  # ramped down (a ramp, not a step)
    assert "OUTPut:STATe OFF" in cmds
    kinds = [e.kind for e in safety]
    assert "safe_state" in kinds and "unsafe" not in kinds
    assert events[-1].status == "aborted"


def at_trip_query_during_ramp(state: BenchState, *, interlock_opens: bool) -> None:
    """The supply trips (and, if asked, the interlock opens) just before the trip is read."""

    def hook(role, text):
        if (
            role == "bias"
            and text.startswith("OUTPut:PROTection:TRIPped")
            and state.bias["setpoint"] == 5.0
        ):
            state.tripped = True
            state.interlock_closed = state.interlock_closed and not interlock_opens

    state.on_query = hook


def test_trip_switches_off_at_once():
    state = BenchState()
    at_trip_query_during_ramp(state, interlock_opens=False)
    out, safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "trip"
    after = [e.kind for e in safety][[e.kind for e in safety].index("reading") :]
    assert "ramp_start" not in after[1:]  # no ramp-down after a trip: off at once
    assert any(e.kind == "output" and e.detail.get("why") == "trip" for e in safety)
    assert state.bias["output"] is False


def test_interlock_opening_between_two_reads_is_reported_as_the_interlock():
    # An opening interlock trips the supply.  When it opens after the interlock was read and
    # before the trip is, the trip is its consequence: the cause reported must be the interlock
    # (found by the reliability suite under load, where the window is wider).
    state = BenchState()
    at_trip_query_during_ramp(state, interlock_opens=True)
    out, _safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "interlock", out
    assert "interlock opened" in str(out)
    assert state.bias["output"] is False


def test_over_current_aborts():
    state = BenchState()
    state.resistance_ohm = 5.0 / 80e-6  # 80 uA at 5 V, above the 50 uA limit of the plan
    out, _safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "overcurrent"
    assert "over-current" in str(out) and state.bias["output"] is False


def test_lost_bias_link_is_reported_unsafe_in_capitals():
    state = BenchState()

    def drop_when_live(role, text):
        if role == "bias" and state.bias["output"] and state.bias["setpoint"] == 5.0:
            state.silent.add("bias")
            state.dead.add("bias")

    state.on_query = drop_when_live
    out, safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted)
    assert "UNSAFE" in str(out)
    assert any(e.kind == "unsafe" for e in safety)


def test_resume_asks_again_before_reapplying_a_ramp():
    def kept(kind):
        return StepResult(kind=kind)

    state = BenchState()
    asked: list[Caution] = []
    bench = scripted_bench(state)
    options = RunOptions(
        operator="B", acknowledge=lambda c: asked.append(c) or True, ramp_poll_s=0.001
    )
    completed = {"hv/limit": kept("bias.limit"), "hv/up": kept("bias.ramp")}
    out = Runner(
        hv_plan(), bench, run_id=4, subscribers=[], options=options, completed=completed
    ).run()
    assert out.status == "completed" and len(asked) == 1
    assert VOLT + " 5" in state.sent("bias")


def test_a_slow_results_database_does_not_delay_the_ramp_down():
    # A results database locked by another writer holds each write up to its busy timeout.  The
    # events of the safe-state sequence are therefore recorded after the supply is down: when the
    # first of them (the start of the ramp to 0 V) reaches a subscriber, the supply has already
    # been ramped down and switched off.  All of them still arrive, in order.
    state = BenchState()

    def open_when_soaking(role, text):
        soaking = state.bias["setpoint"] == 5.0 and state.at_setpoint()  # slewed all the way
        if role == "bias" and soaking and text.startswith("SYSTem:INT"):
            state.interlock_closed = False

    state.on_query = open_when_soaking
    seen_at_ramp_down: list[list[str]] = []

    def slow_store(event):
        down = isinstance(event, SafetyEvent) and event.kind == "ramp_start"
        if down and event.detail["to_V"] == 0.0:
            seen_at_ramp_down.append(list(state.sent("bias")))

    bench = scripted_bench(state)
    safety: list[SafetyEvent] = []
    options = RunOptions(
        operator="A. Technician", ramp_poll_s=0.001, interlock_interval_s=0.01, unattended=True
    )
    p = hv_plan(extra=[step("hv/soak", "wait", seconds=0.5)])
    runner = Runner(
        p,
        bench,
        run_id=3,
        subscribers=[slow_store, lambda e: isinstance(e, SafetyEvent) and safety.append(e)],
        options=options,
    )
    with pytest.raises(RunAborted, match="interlock"):
        runner.run()
    (sent,) = seen_at_ramp_down
    assert "OUTPut:STATe OFF" in sent and sent.index(VOLT + " 0") > sent.index(VOLT + " 5")
    kinds = [e.kind for e in safety]
    down = kinds.index("ramp_start", kinds.index("ramp_start") + 1)
    assert "output" in kinds[down:] and kinds[-1] == "safe_state"
    stamps = [e.at for e in safety]
    assert stamps == sorted(stamps)  # each event keeps the time it happened


def test_safety_events_the_store_refused_are_reported_not_lost_silently():
    # The store refusing a write during the safe-state sequence must neither stop the sequence
    # nor vanish: the run ends safe and its outcome says what was not recorded.
    state = BenchState()

    def refusing_store(event):
        if isinstance(event, SafetyEvent) and event.kind == "safe_state":
            raise OSError("database is locked")

    options = RunOptions(
        operator="A. Technician", ramp_poll_s=0.001, interlock_interval_s=0.01, unattended=True
    )
    runner = Runner(
        hv_plan(), scripted_bench(state), run_id=3, subscribers=[refusing_store], options=options
    )
    out = runner.run()
    assert out.status == "completed"
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0
    (warning,) = out.warnings
    assert "safety event(s) not recorded" in warning and "safe_state" in warning
    assert "database is locked" in warning


def test_a_subscriber_failing_in_the_cleanup_block_does_not_skip_the_safe_state():
    # The main block leaves the bias live at 5 V (the safe state at the end brings it down).  The
    # store refuses the cleanup step's record -- and again the record of its failure (a run taken
    # over by another process: every write refused).  The run must still end at 0 V, output off.
    from sequencer.errors import LeaseLost
    from sequencer.events import StepFinished

    state = BenchState()

    def refusing_store(event):
        if isinstance(event, StepFinished) and event.path.startswith("end/"):
            raise LeaseLost("run 3 was taken over by another process")

    p = plan(
        [
            step("hv/limit", "bias.limit", current=50.0),
            step("hv/up", "bias.ramp", volts=5.0, rate=5.0),
            step("end/pause", "wait", block="cleanup", seconds=0.0),
        ],
        hazards=("bias",),
        max_bias_volts=5.0,
    )
    options = RunOptions(
        operator="A. Technician", ramp_poll_s=0.001, interlock_interval_s=0.01, unattended=True
    )
    runner = Runner(p, scripted_bench(state), run_id=3, subscribers=[refusing_store],
                    options=options)
    with pytest.raises(RunAborted, match="taken over by another process"):
        runner.run()
    cmds = state.sent("bias")
    assert cmds.index(VOLT + " 0") > cmds.index(VOLT + " 5")  # brought down after going up
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0
