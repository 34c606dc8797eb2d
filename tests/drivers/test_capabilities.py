"""Capabilities declared, never faked: faked state queries and missing operations refused at load
with their location; a supply without a slew command ramped in software; a read-back running ahead
of the commanded ramp refused."""

import textwrap

import pytest

from drivers.bench import load_bench
from drivers.benchfile import InstrumentSpec
from drivers.dialect import parse_dialect, shipped_dialect_path
from drivers.errors import ConfigError, RampRunaway, SafetyLimitError
from drivers.roles.bias import BiasSupply
from drivers.roles.ramp import RampPlan, ahead_margin_V
from drivers.scpi.session import ScpiSession
from tests.drivers.scripted import ScriptedTransport, configured

GENERIC_TEXT = shipped_dialect_path("generic").read_text()
INTERLOCK = '    interlock_closed: {query: "SYSTem:INTerlock:STATe?", returns: bool}'
SLEW_SET = '    set_ramp_rate: {write: "SOURce:VOLTage:SLEW {volts_per_s:.9g}"}'
SLEW_GET = '    get_ramp_rate: {query: "SOURce:VOLTage:SLEW?", returns: float}'


def generic_with(old: str, new: str) -> str:
    assert old in GENERIC_TEXT
    return GENERIC_TEXT.replace(old, new)


def refused(text: str) -> str:
    with pytest.raises(ConfigError) as exc:
        parse_dialect(text, "lab.yaml")
    return str(exc.value)


@pytest.mark.parametrize(
    "faked",
    [
        '{query: "*OPC?"}',  # always 1: the interlock would always read closed (issue 14)
        '{query: "*IDN?", reply: {words: {X: true}}}',
        '{query: "SYSTem:INTerlock?", reply: {words: {"0": true, "1": true}}}',
        '{query: "SYSTem:INTerlock?", reply: {pattern: "[01]"}}',
        '{query: "SYSTem:INTerlock:STATe"}',  # not a query at all
        '{sequence: [{wait: 0.1}, {query: "SYSTem:INTerlock:STATe?"}]}',
    ],
)
def test_a_query_that_cannot_report_the_interlock_is_refused_at_load(faked):
    line = next(
        i for i, text in enumerate(GENERIC_TEXT.splitlines(), 1) if text.startswith(INTERLOCK)
    )
    message = refused(generic_with(INTERLOCK, f"    interlock_closed: {faked}"))
    assert f"lab.yaml:{line}:" in message
    assert "bias.interlock_closed" in message and "safety that is not measured" in message


def test_a_faked_trip_query_is_refused_too_and_a_status_bit_is_accepted():
    trip = '    tripped: {query: "OUTPut:PROTection:TRIPped?", returns: bool}'
    assert "bias.tripped asks '*OPC?'" in refused(
        generic_with(trip, '    tripped: {query: "*OPC?"}')
    )
    ok = generic_with(
        trip, '    tripped: {query: "STATus:QUEStionable:CONDition?", reply: {bit: 4}}'
    )
    assert parse_dialect(ok, "lab.yaml").has("bias", "tripped")


def bench(tmp_path, dialect_text: str, extra: str = "") -> str:
    (tmp_path / "lab.yaml").write_text(dialect_text)
    path = tmp_path / "bench.yaml"
    path.write_text(
        textwrap.dedent(
            f"""\
            bench: b
            instruments:
              bias: {{address: "TCPIP0::127.0.0.1::5029::SOCKET", dialect: ./lab.yaml,
                      max_volts: 60, max_ramp_V_per_s: 5{extra}}}
            """
        )
    )
    return str(path)


def test_an_unreadable_interlock_needs_a_declared_hardware_interlock(tmp_path):
    text = generic_with(INTERLOCK, '    interlock_closed: {absent: "no interlock input readable"}')
    with pytest.raises(ConfigError) as exc:
        load_bench(bench(tmp_path, text))
    message = str(exc.value)
    assert message.startswith(f"{tmp_path}/bench.yaml:3:")
    assert "cannot read the interlock" in message and "hardware_interlock" in message
    spec = load_bench(bench(tmp_path, text, ', hardware_interlock: "door switch on INH, tested"'))
    assert spec.instruments["bias"].hardware_interlock == "door switch on INH, tested"


def test_a_dialect_missing_a_needed_operation_is_refused_at_bench_load(tmp_path):
    text = generic_with('    measure_current: {query: "MEASure:CURRent:DC?", returns: float}\n', "")
    with pytest.raises(ConfigError) as exc:
        load_bench(bench(tmp_path, text))
    assert "has no bias.measure_current, which the shipped steps need" in str(exc.value)
    absent = generic_with(
        '    measure_current: {query: "MEASure:CURRent:DC?", returns: float}',
        '    measure_current: {absent: "no ammeter"}',
    )
    with pytest.raises(ConfigError, match="nothing may stand in for it"):
        load_bench(bench(tmp_path, absent))


def no_slew_dialect():  # a source-measure unit without a slew command
    text = generic_with(SLEW_SET, '    set_ramp_rate: {absent: "no slew command"}')
    return parse_dialect(text.replace(SLEW_GET, "    get_ramp_rate: absent"), "smu.yaml")


class SupplyLink:
    """The edge for the software-ramp test: a supply without a slew command, answering only the
    set point it was last given and an empty error queue; it records what it was sent."""

    address = "SUPPLY::1"
    timeout_ms = 5000
    read_termination = "\n"

    def __init__(self) -> None:
        self.writes: list[str] = []
        self.setpoint = 0.0
        self._reply: list[bytes] = []

    def write(self, text: str) -> None:
        self.writes.append(text)
        head, _, value = text.partition(" ")
        if head == "OUTPut:STATe?":
            self._reply.append(b"1")  # live: the ramp must be stepped
        elif head.endswith("AMPLitude?"):
            self._reply.append(f"{self.setpoint:g}".encode())
        elif head.endswith("AMPLitude"):
            self.setpoint = float(value)
        elif head == "SYSTem:ERRor:NEXT?":
            self._reply.append(b'0,"No error"')

    def read(self) -> bytes:
        return self._reply.pop(0)

    def read_bytes(self, n: int) -> bytes:
        raise AssertionError("no binary data here")

    def more_pending(self, wait_s: float = 0.0) -> bool:
        return False

    def drain(self) -> None:
        self._reply.clear()

    def reconnect(self) -> None:
        pass

    def close(self) -> None:
        pass


def test_a_supply_without_a_slew_command_is_ramped_in_software(monkeypatch):
    # the driver's clock advances 0.2 s per read-back here, whatever the machine's load: at
    # 5 V/s five read-backs plan 5 V of the 10 V ramp (no wall-clock bound hidden in the test)
    import types

    import drivers.roles.bias as bias_module

    now = [1000.0]
    monkeypatch.setattr(bias_module, "time", types.SimpleNamespace(monotonic=lambda: now[0]))
    link = SupplyLink()
    spec = InstrumentSpec(role="bias", address=link.address, max_volts=60, max_ramp_V_per_s=5)
    bias = BiasSupply(ScpiSession(link), no_slew_dialect(), spec)
    assert bias.software_ramp and bias.interlock_readable
    bias.start_ramp(10.0, 5.0)
    volt = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"
    # live, so the ramp starts from the set point and nothing is moved yet
    assert link.writes == ["OUTPut:STATe?", f"{volt}?"]
    assert not any("SLEW" in w for w in link.writes)
    # each read-back moves the set point to where the ramp is by now: up in small steps, never
    # the 10 V target at once (a read-back of the set point itself stays within the plan)
    seen = []
    for _ in range(5):
        now[0] += 0.2
        bias.follow_ramp(link.setpoint)
        seen.append(link.setpoint)
    assert seen == sorted(seen) and seen[0] >= 0.0 and seen[-1] < 10.0
    assert [w for w in link.writes if w.startswith(volt + " ")]  # set points were sent


def test_ramp_plan_positions_and_the_runaway_rule():
    # from 0 V to 10 V at 5 V/s begun at t = 100 s: 2.5 V at 100.5 s, held at 10 V from 102 s
    plan = RampPlan(start=0.0, target=10.0, rate=5.0, t0=100.0)
    assert plan.position(100.0) == 0.0 and plan.position(100.5) == 2.5
    assert plan.position(103.0) == 10.0 and plan.done(103.0)
    margin = ahead_margin_V(10.0)  # 0.5 V + 2 % of 10 V = 0.7 V
    assert margin == pytest.approx(0.7)
    assert not plan.runs_ahead(2.5 + 0.69, 100.5)
    assert plan.runs_ahead(2.5 + 0.71, 100.5)
    # the case: 0 -> 10 V in 0.11 s while 5 V/s was logged
    assert plan.runs_ahead(10.0, 100.11)
    # going down faster than commanded is the safe direction: never refused
    down = RampPlan(start=10.0, target=0.0, rate=5.0, t0=100.0)
    assert not down.runs_ahead(0.0, 100.1)
    negative = RampPlan(start=0.0, target=-10.0, rate=5.0, t0=100.0)
    assert negative.runs_ahead(-5.0, 100.5) and not negative.runs_ahead(-2.0, 100.5)


def test_a_supply_that_jumps_is_refused_while_ramping():
    volt = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"
    t = ScriptedTransport().expect(
        ("MEASure:VOLTage:DC?", b"0\n"),
        configured("SOURce:VOLTage:SLEW 5"),
        configured(f"{volt} 10"),
    )
    spec = InstrumentSpec(role="bias", address=t.address, max_volts=60, max_ramp_V_per_s=5)
    bias = BiasSupply(ScpiSession(t), parse_dialect(GENERIC_TEXT, "generic.yaml"), spec)
    bias.start_ramp(10.0, 5.0) if bias.voltage() == 0.0 else None
    with pytest.raises(RampRunaway, match="ahead of the commanded ramp"):
        bias.follow_ramp(10.0)  # 10 V read back right after a 5 V/s ramp began
    assert isinstance(RampRunaway("x"), SafetyLimitError)
    bias.follow_ramp(10.0)  # the plan is dropped once refused: the ramp-down is not refused
