"""Readings that drive a safety decision are checked (issue 19, item 1), over the real drivers on a
scripted link: NaN, infinity, SCPI's not-a-number 9.91E+37 and values beyond the bench limits abort
into the safe state; a lying output state is not believed; ramp deadlines come from the commanded
values; a second stop request cuts a ramp-down short with the output switched off at once.

9.91E+37 is SCPI's NAN (SCPI-1999 Vol. 1 7.2.1.5, from memory).
"""

from __future__ import annotations

import pytest

from sequencer.engine import Runner, RunOptions
from sequencer.engine.context import RunContext, StopFlag
from sequencer.engine.runner import utc_now
from sequencer.engine.safety import BiasGuard, safe_command
from sequencer.errors import RunAborted

from .scripted import BenchState, scripted_bench
from .test_safety import VOLT, hv_plan, run

MEASURE_V = "MEASURE:VOLTAGE:DC?"
MEASURE_I = "MEASURE:CURRENT:DC?"
OUTPUT_Q = "OUTPUT:STATE?"


def lie_when_live(state: BenchState, head: str, reply: str) -> None:
    """From the moment the set point is at 5 V, ``head`` is answered with ``reply``."""

    def hook(role: str, text: str) -> None:
        if role == "bias" and state.bias["setpoint"] == 5.0 and state.bias["output"]:
            state.lies[head] = reply

    state.on_query = hook


def kinds(safety):
    return [e.kind for e in safety]


@pytest.mark.parametrize("reply", ["NAN", "9.91E+37", "9.9E+37", "-9.9E+37", "inf", "500"])
def test_an_implausible_voltage_aborts_and_switches_off_at_once(reply):
    # 500 V is beyond the bench's max_volts of 60 V (scripted BIAS_LIMITS) plus any margin.
    state = BenchState()
    lie_when_live(state, MEASURE_V, reply)
    out, safety, events = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "instrument", out
    assert "implausible" in str(out)
    assert "implausible" in kinds(safety)
    off = [e for e in safety if e.kind == "output" and e.detail.get("why") == "implausible reading"]
    assert len(off) == 1 and state.bias["output"] is False and state.bias["setpoint"] == 0.0
    # the read-back still lies, so the safe state cannot be confirmed: UNSAFE, with the remedy
    assert "UNSAFE" in str(out) and "benchwright safe --bench" in str(out)
    assert events[-1].status == "aborted"


@pytest.mark.parametrize("reply", ["NAN", "9.91E+37", "nan"])
def test_an_unknown_current_aborts_instead_of_disabling_the_over_current_check(reply):
    # The voltage still reads true, so the ramp-down runs at the permitted rate and is verified.
    state = BenchState()
    lie_when_live(state, MEASURE_I, reply)
    out, safety, _ = run(hv_plan(), state, unattended=True)
    assert isinstance(out, RunAborted) and out.cause == "instrument", out
    assert "current" in str(out) and "UNSAFE" not in str(out)
    cmds = state.sent("bias")
    assert cmds.index(VOLT + " 0") > cmds.index(VOLT + " 5")  # ramped down, not stepped
    assert kinds(safety)[-1] == "safe_state" and state.bias["output"] is False


def test_a_plausible_reading_within_the_margin_is_accepted():
    # control for the bound: 62 V with max_volts 60 is within 10 % + 1 V (readings.py)
    state = BenchState()
    lie_when_live(state, MEASURE_V, "62")
    out, _safety, _ = run(hv_plan(), state, unattended=True, ramp_margin_s=0.05)
    # not refused as implausible; the run still ends, because 62 V during a ramp to 5 V runs
    # ahead of the commanded rate (drivers/roles/ramp.py) or never settles at 5 V
    assert isinstance(out, RunAborted) and "implausible" not in str(out)
    assert "did not reach 5 V" in str(out) or "ahead of the commanded ramp" in str(out)


def test_output_reading_off_at_a_voltage_is_not_believed():
    # A lying output state: OUTP? says 0 while the meter reads 5 V.  The ramp-down step does not
    # take "off" for done: it ramps to 0 V (a ramp, not a step), then the output goes off.
    state = BenchState()
    lie_when_live(state, OUTPUT_Q, "0")
    out, safety, _ = run(hv_plan(), state, unattended=True)
    assert out.status == "completed", out
    cmds = state.sent("bias")
    assert cmds.index(VOLT + " 0") > cmds.index(VOLT + " 5")
    assert cmds.index("OUTPut:STATe OFF") > cmds.index(VOLT + " 0")
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0
    assert kinds(safety)[-1] == "safe_state"


def test_a_stuck_supply_is_switched_off_after_a_deadline_from_the_commanded_values():
    state = BenchState()
    state.lag_polls = 10**9  # the meter never follows the set point
    out, safety, _ = run(hv_plan(), state, unattended=True, ramp_margin_s=0.05)
    assert isinstance(out, RunAborted) and "did not reach 5 V" in str(out)
    # the meter reads 0 V: nothing to ramp down, the output goes off and reads back off
    assert kinds(safety)[-1] == "safe_state" and state.bias["output"] is False


def test_ramp_time_comes_from_commanded_values_and_bench_limits():
    state = BenchState()
    bench = scripted_bench(state)
    ctx = RunContext(
        plan=hv_plan(),
        bench=bench,
        run_id=1,
        emit=lambda e: None,
        options=RunOptions(ramp_margin_s=2.0),
        clock=utc_now,
        stop=StopFlag(),
    )
    guard = BiasGuard(ctx)
    # nothing commanded yet: the bench's whole range (max_volts 60 V) plus the target, at 10 V/s
    assert guard.ramp_time_s(5.0, 10.0) == pytest.approx((60 + 5) / 10 * 1.5 + 2.0)
    guard.commanded = 5.0
    assert guard.ramp_time_s(0.0, 5.0) == pytest.approx(5 / 5 * 1.5 + 2.0)


def test_a_second_stop_request_cuts_the_ramp_down_short():
    state = BenchState()
    runner_box: list[Runner] = []

    def hook(role: str, text: str) -> None:
        if role != "bias" or not text.startswith("MEASure:VOLT"):
            return
        runner = runner_box[0]
        live = state.bias["output"] and state.output_V() > 4.5  # slewed up near 5 V
        if state.bias["setpoint"] == 5.0 and live and runner.stop.requests == 0:
            runner.stop.request("signal", "stopped by SIGTERM")
            state.lag_polls = 10**9  # from now on the meter stays at 5 V: a slow ramp-down
        elif state.bias["setpoint"] == 0.0 and runner.stop.requests == 1:
            runner.stop.request("signal", "stopped by SIGTERM")  # the operator presses again

    state.on_query = hook
    bench = scripted_bench(state)
    events: list = []
    options = RunOptions(unattended=True, ramp_poll_s=0.001, interlock_interval_s=0.01)
    runner = Runner(hv_plan(), bench, run_id=3, subscribers=[events.append], options=options)
    runner_box.append(runner)
    with pytest.raises(RunAborted) as info:
        runner.run()
    assert info.value.cause == "signal"
    safety = [e for e in events if getattr(e, "kind", None) and hasattr(e, "detail")]
    assert "ramp_cut" in kinds(safety) and "ramp_stuck" not in kinds(safety)
    assert state.bias["output"] is False


def test_the_safe_command_names_the_bench_file():
    assert safe_command("/lab/bench-2.yaml") == "benchwright safe --bench /lab/bench-2.yaml"
    assert safe_command("<bench>") == "benchwright safe --bench BENCH.yaml"
