"""The bias guard with capabilities a dialect declares absent: a software ramp for a supply
without a slew command, and a hardware interlock the software cannot read (recorded, never faked)."""

from __future__ import annotations

import itertools

from drivers.dialect import shipped_dialect_path
from sequencer.engine import Runner, RunOptions
from sequencer.errors import RunAborted
from sequencer.events import SafetyEvent

from .scripted import BenchState, scripted_bench
from .test_safety import VOLT, hv_plan

GENERIC = shipped_dialect_path("generic").read_text()
INTERLOCK = '    interlock_closed: {query: "SYSTem:INTerlock:STATe?", returns: bool}'
SLEW_SET = '    set_ramp_rate: {write: "SOURce:VOLTage:SLEW {volts_per_s:.9g}"}'
SLEW_GET = '    get_ramp_rate: {query: "SOURce:VOLTage:SLEW?", returns: float}'


def dialect_file(tmp_path, *replacements: tuple[str, str]) -> str:
    text = GENERIC
    for old, new in replacements:
        assert old in text
        text = text.replace(old, new)
    path = tmp_path / "lab-supply.yaml"
    path.write_text(text)
    return str(path)


def run(state, bias, **opts):
    bench = scripted_bench(state, bias=bias)
    events: list = []
    options = RunOptions(operator="A. Technician", ramp_poll_s=0.001, interlock_interval_s=0.01,
                         unattended=True, **opts)  # fmt: skip
    try:
        out = Runner(hv_plan(), bench, run_id=3, subscribers=[events.append], options=options).run()
    except RunAborted as exc:
        out = exc
    return out, [e for e in events if isinstance(e, SafetyEvent)]


def test_a_supply_without_a_slew_command_is_ramped_in_small_steps(tmp_path, monkeypatch):
    # The software ramp plans its set points on the driver's clock, which here ticks 10 ms per
    # look: the steps depend on the number of polls, never on how busy the machine is (with the
    # real clock, one stall of a second between two polls made the whole ramp one step).
    import types

    import drivers.roles.bias as bias_module

    ticks = itertools.count()
    monkeypatch.setattr(
        bias_module, "time", types.SimpleNamespace(monotonic=lambda: 1000.0 + next(ticks) * 0.01)
    )
    path = dialect_file(
        tmp_path,
        (SLEW_SET, '    set_ramp_rate: {absent: "no slew command"}'),
        (SLEW_GET, "    get_ramp_rate: absent"),
    )
    state = BenchState()
    state.bias["rate"] = 1e9  # without a slew command the supply jumps to each set point
    out, safety = run(state, {"dialect": path})
    assert not isinstance(out, RunAborted), out
    sent = state.sent("bias")
    assert not any("SLEW" in c for c in sent)
    up = [float(c.split()[-1]) for c in sent if c.startswith(VOLT + " ")]
    peak = up.index(max(up))
    rising = up[: peak + 1]
    # many set points on the way up (5 V at 5 V/s polled every ms), never a step to 5 V at once
    assert len(set(rising)) > 3 and rising == sorted(rising) and max(up) == 5.0
    assert max(b - a for a, b in itertools.pairwise(rising)) < 5.0
    assert [e.kind for e in safety][-1] == "safe_state" and state.bias["output"] is False


def test_an_unreadable_interlock_rests_on_the_declared_hardware_interlock(tmp_path):
    path = dialect_file(tmp_path, (INTERLOCK, '    interlock_closed: {absent: "not readable"}'))
    state = BenchState()
    wired = "door switch in series with the INHIBIT input, tested 2026-11-30"
    out, safety = run(state, {"dialect": path, "hardware_interlock": wired})
    assert not isinstance(out, RunAborted), out
    assert not any("INTerlock" in c for c in state.sent("bias"))  # never asked, never faked
    first = next(e for e in safety if e.kind == "interlock")
    assert first.detail == {"closed": None, "hardware": wired}
    ack = next(e for e in safety if e.kind == "acknowledgement")
    assert ack.detail["hardware"] == wired
    readings = [e for e in safety if e.kind == "reading" and "interlock_closed" in e.detail]
    assert readings and all(e.detail["interlock_closed"] is None for e in readings)
