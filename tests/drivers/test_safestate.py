"""drivers.safestate over the real bias driver on a scripted link (tests/sequencer/engine/scripted.py:
the measured voltage follows the set point while the output is on, at once or after a lag)."""

from __future__ import annotations

from drivers.safestate import SafeSettings, make_supply_safe
from tests.sequencer.engine.scripted import BenchState, scripted_bench

VOLT = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"
FAST = SafeSettings(poll_s=0.001)


def live_state(volts: float = 5.0) -> BenchState:
    state = BenchState()
    state.bias.update(setpoint=volts, output=True)
    state.settle()  # at 5 V when found, whatever the wall clock (it slewed up from 0 V at 1 V/s)
    return state


def test_a_live_supply_is_ramped_down_then_switched_off():
    state = live_state()
    outcome = make_supply_safe(scripted_bench(state).bias, settings=FAST)
    assert outcome.safe and outcome.before is not None and outcome.before.output_on
    sent = state.sent("bias")
    # the bench limit (scripted BIAS_LIMITS: 10 V/s) is the ramp rate, then 0 V, then off
    assert sent.index("SOURce:VOLTage:SLEW 10") < sent.index(VOLT + " 0")
    assert sent.index(VOLT + " 0") < sent.index("OUTPut:STATe OFF")
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0


def test_an_output_reading_off_at_a_voltage_is_ramped_down_all_the_same():
    state = live_state()
    state.lies["OUTPUT:STATE?"] = "0"  # lies about its output; the meter reads 5 V
    outcome = make_supply_safe(scripted_bench(state).bias, settings=FAST)
    assert any(a.startswith("ramped down") for a in outcome.actions), outcome
    assert state.bias["output"] is False and state.bias["setpoint"] == 0.0


def test_a_stop_request_cuts_the_ramp_down_short_with_the_output_off():
    state = live_state()
    state.lag_polls = 10**9  # the meter never follows: the ramp-down would take its deadline
    asked = []
    outcome = make_supply_safe(
        scripted_bench(state).bias, settings=FAST, should_stop=lambda: bool(asked.append(1))
        or len(asked) > 2,
    )
    assert any("cut short by a stop request" in a for a in outcome.actions), outcome
    assert state.bias["output"] is False
    assert not outcome.safe  # the lagging meter still reads 5 V: not confirmed


def test_a_meter_answering_nan_gets_the_output_off_and_no_confirmation():
    state = live_state()
    state.lies["MEASURE:VOLTAGE:DC?"] = "NAN"
    outcome = make_supply_safe(scripted_bench(state).bias, settings=FAST)
    assert not outcome.safe and "not confirmed" in outcome.problem
    assert any(a.startswith("implausible reading") for a in outcome.actions)
    assert state.bias["output"] is False
