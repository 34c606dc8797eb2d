"""Every role over a scripted transport: the exact command strings the generic dialect produces.

Units: the API takes mV / ns / µA, the wire carries SI base units (V, s, A) as the generic dialect's
header states; conversions are exact powers of ten (SI prefixes).
"""

import numpy as np
import pytest

from drivers.bench import InstrumentSpec
from drivers.dialect import load_dialect, parse_dialect, shipped_dialect_path
from drivers.errors import ProtocolError, SafetyLimitError
from drivers.roles import (
    BiasSupply,
    CoincidenceUnit,
    Counter,
    Pulser,
    Scope,
    Switch,
    ThresholdDac,
)
from drivers.roles.switch import injection_number, parse_channel_list, route_number
from drivers.scpi.session import ScpiSession
from tests.drivers.scripted import ScriptedTransport, configured

GENERIC = load_dialect("generic")
GENERIC_TEXT = shipped_dialect_path("generic").read_text()


def build(cls, t: ScriptedTransport, **spec):
    spec = InstrumentSpec(role=cls.role, address=t.address, **spec)
    return cls(ScpiSession(t), GENERIC, spec)


def sent(t: ScriptedTransport) -> list[str]:
    return [w for w in t.writes if w != "SYSTem:ERRor:NEXT?"]


# -- pulser ---------------------------------------------------------------------------------------
def test_pulser_amplitude_shape_rate_and_output():
    t = ScriptedTransport().expect(
        configured("SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0.25"),
        configured("SOURce:PULSe:WIDTh 5e-08"),
        configured("SOURce:PULSe:TRANsition:LEADing 2e-09"),
        configured("SOURce:PULSe:TRANsition:TRAiling 1e-08"),
        configured("SOURce:FREQuency:CW 1000"),
        configured("SOURce:FREQuency:CW 10000"),
        configured("TRIGger:SEQuence:SOURce BUS"),
        configured("OUTPut:STATe ON"),
        configured("*TRG"),
        ("SOURce:VOLTage:LEVel:IMMediate:AMPLitude?", b"+2.500000E-01\n"),
        ("OUTPut:STATe?", b"1\n"),
    )
    p = build(Pulser, t)
    p.set_amplitude(250)
    p.set_shape(width_ns=50, leading_ns=2, trailing_ns=10)
    p.set_rate(1000)
    p.set_period(100_000)  # 100 µs -> 10 kHz
    p.set_trigger_source("BUS")
    p.set_output(True)
    p.trigger()
    assert p.amplitude_mV() == pytest.approx(250.0)
    assert p.output_on() is True
    t.assert_done()


def test_pulser_burst_zero_is_continuous():
    t = ScriptedTransport().expect(
        configured("SOURce:BURSt:NCYCles 100"),
        configured("SOURce:BURSt:STATe ON"),
        configured("SOURce:BURSt:STATe OFF"),
    )
    p = build(Pulser, t)
    p.set_burst(100)
    p.set_burst(0)
    t.assert_done()
    with pytest.raises(ValueError):
        p.set_burst(-1)
    with pytest.raises(ValueError):
        p.set_rate(0)


# -- scope ----------------------------------------------------------------------------------------
SCOPE_OPEN = [*configured("FORMat:BORDer NORMal"), *configured("FORMat:DATA INTeger,16")]


def test_scope_sends_data_format_once_when_opened_and_configures():
    t = ScriptedTransport().expect(
        SCOPE_OPEN,
        configured("SENSe:VOLTage1:RANGe:UPPer 2"),
        configured("SENSe:VOLTage1:OFFSet -0.1"),
        configured("SENSe:SWEep:POINts 2000"),
        configured("SENSe:SWEep:SRATe 1e+09"),  # NR3 form, IEEE 488.2 §7.7.2.1 (from memory)
        configured("TRIGger:SEQuence:DELay 2e-07"),
        configured("TRIGger:SEQuence:SOURce EXTernal"),
        configured("TRIGger:SEQuence:LEVel 0.5"),
        configured("SENSe:AVERage:COUNt 16"),
    )
    s = build(Scope, t)
    s.set_input(1, range_mV=2000, offset_mV=-100)
    s.set_timebase(sample_rate_hz=1e9, points=2000, pretrigger_ns=200)
    s.set_trigger("EXTernal", level_mV=500)
    s.set_averages(16)
    t.assert_done()


def test_scope_fetch_calibrates_with_the_preamble():
    codes = np.array([0, 10, -100, 2560, 32767], dtype=">i2")
    block = b"#210" + codes.tobytes() + b"\n"
    t = ScriptedTransport().expect(
        SCOPE_OPEN,
        ("TRACe:PREamble? CHANnel2", b"1e-09,-5e-08,0.0005,-0.01,5,16\n"),
        ("TRACe:DATA? CHANnel2", block),
    )
    trace = build(Scope, t).fetch(2)
    # volts = code * y_increment + y_origin (the preamble's definition in the dialect)
    np.testing.assert_allclose(trace.volts, codes.astype(float) * 0.0005 - 0.01)
    assert trace.volts.dtype == np.float64
    assert (trace.dt_s, trace.t0_s, trace.source, trace.averages) == (1e-9, -5e-8, "CHAN2", 16)
    assert trace.time_ns[:2].tolist() == pytest.approx([-50.0, -49.0])


def test_scope_capture_acquires_once_then_fetches_each_input():
    one = b"#12" + np.array([100], dtype=">i2").tobytes() + b"\n"
    t = ScriptedTransport().expect(
        SCOPE_OPEN,
        configured("INITiate:IMMediate"),
        ("*OPC?", b"1\n"),
        ("TRACe:PREamble? CHANnel1", b"1e-9,0,0.001,0,1,1\n"),
        ("TRACe:DATA? CHANnel1", one),
        ("TRACe:PREamble? CHANnel3", b"1e-9,0,0.002,0,1,1\n"),
        ("TRACe:DATA? CHANnel3", one),
    )
    traces = build(Scope, t).capture([1, 3])
    assert [tr.source for tr in traces] == ["CHAN1", "CHAN3"]
    assert [tr.volts[0] for tr in traces] == pytest.approx([0.1, 0.2])
    t.assert_done()


def test_scope_fetch_follows_a_swapped_byte_order_dialect():
    text = GENERIC_TEXT.replace("FORMat:BORDer NORMal", "FORMat:BORDer SWAPped")
    text = text.replace("kind: int16, byte_order: big", "kind: int16, byte_order: little")
    dialect = parse_dialect(text, "swapped.yaml")
    codes = np.array([1, 256, -300], dtype="<i2")  # little-endian on the wire (SWAPped)
    t = ScriptedTransport().expect(
        configured("FORMat:BORDer SWAPped"),
        configured("FORMat:DATA INTeger,16"),
        ("TRACe:PREamble? CHANnel1", b"1e-9,0,1,0,3,1\n"),
        ("TRACe:DATA? CHANnel1", b"#16" + codes.tobytes() + b"\n"),
    )
    spec = InstrumentSpec(role="scope", address=t.address)
    trace = Scope(ScpiSession(t), dialect, spec).fetch(1)
    assert trace.volts.tolist() == [1.0, 256.0, -300.0]


def test_scope_rejects_an_odd_length_int16_block():
    t = ScriptedTransport().expect(
        SCOPE_OPEN,
        ("TRACe:PREamble? CHANnel1", b"1e-9,0,1,0,1,1\n"),
        ("TRACe:DATA? CHANnel1", b"#13\x00\x01\x02\n"),
    )
    with pytest.raises(ProtocolError, match="whole number"):
        build(Scope, t).fetch(1)


def test_scope_rejects_a_preamble_that_disagrees_with_the_block():
    t = ScriptedTransport().expect(
        SCOPE_OPEN,
        ("TRACe:PREamble? CHANnel1", b"1e-9,0,0.001,0,3,1\n"),
        ("TRACe:DATA? CHANnel1", b"#12\x00\x01\n"),
    )
    with pytest.raises(ProtocolError, match="3 points"):
        build(Scope, t).fetch(1)


# -- threshold ------------------------------------------------------------------------------------
def test_threshold_level_in_mV_per_channel():
    t = ScriptedTransport().expect(
        configured("SOURce4:VOLTage:LEVel:IMMediate:AMPLitude 0.0125"),
        ("SOURce4:VOLTage:LEVel:IMMediate:AMPLitude?", b"0.0125\n"),
    )
    dac = build(ThresholdDac, t)
    dac.set_level(4, 12.5)
    assert dac.level_mV(4) == pytest.approx(12.5)
    with pytest.raises(ValueError):
        dac.set_level(0, 1.0)


# -- counter --------------------------------------------------------------------------------------
def test_counter_counts_with_a_timeout_longer_than_the_gate():
    t = ScriptedTransport(timeout_ms=1000).expect(
        configured("SENSe:GATE:TIME 5"),
        configured("ROUTe:TERMinals:CHANnel 3"),
        configured("INITiate:IMMediate"),
        ("FETCh:TOTalize?", b"12345\n"),
    )
    c = build(Counter, t)
    c.set_gate(5.0)
    assert c.count(3) == 12345
    fetch_timeout = t.timeouts_at_write[t.writes.index("FETCh:TOTalize?")]
    assert fetch_timeout > 5000
    assert t.timeout_ms == 1000  # restored


def test_counter_reads_the_gate_when_not_set_and_gives_a_rate():
    t = ScriptedTransport().expect(
        ("SENSe:GATE:TIME?", b"0.5\n"),
        configured("ROUTe:TERMinals:CHANnel 1"),
        configured("INITiate:IMMediate"),
        ("FETCh:TOTalize?", b"+1.000000E+03\n"),
    )
    assert build(Counter, t).rate_hz(1) == pytest.approx(2000.0)


# -- bias -----------------------------------------------------------------------------------------
def bias(t, **kw):
    return build(
        BiasSupply, t, **{"max_volts": 60.0, "max_ramp_V_per_s": 5.0, "max_current_uA": 10.0, **kw}
    )


def test_bias_ramp_sets_slew_then_voltage():
    t = ScriptedTransport().expect(
        configured("SOURce:VOLTage:SLEW 2"),
        configured("SOURce:VOLTage:LEVel:IMMediate:AMPLitude 42.5"),
        configured("SOURce:CURRent:LIMit 5e-06"),
        configured("OUTPut:STATe ON"),
        ("MEASure:VOLTage:DC?", b"42.49\n"),
        ("MEASure:CURRent:DC?", b"8.5e-09\n"),
        ("SYSTem:INTerlock:STATe?", b"1\n"),
        ("OUTPut:PROTection:TRIPped?", b"0\n"),
        ("OUTPut:STATe?", b"1\n"),
        ("SOURce:VOLTage:LEVel:IMMediate:AMPLitude?", b"42.5\n"),
        configured("OUTPut:PROTection:CLEar"),
    )
    b = bias(t)
    b.start_ramp(42.5, 2.0)
    b.set_current_limit(5.0)
    b.set_output(True)
    assert b.voltage() == pytest.approx(42.49)
    assert b.current_A() == pytest.approx(8.5e-9)
    assert b.interlock_closed() and not b.tripped() and b.output_on()
    assert b.setpoint() == 42.5
    b.clear_trip()
    t.assert_done()


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda b: b.start_ramp(61.0, 1.0), "above the bench limit of 60"),
        (lambda b: b.start_ramp(-61.0, 1.0), "above the bench limit"),
        (lambda b: b.start_ramp(30.0, 5.5), "ramp 5.5 V/s"),
        (lambda b: b.start_ramp(30.0, 0.0), "ramp 0 V/s"),
        (lambda b: b.set_current_limit(11.0), "current limit 11"),
    ],
)
def test_bias_limits_refused_before_anything_is_sent(call, match):
    t = ScriptedTransport()
    with pytest.raises(SafetyLimitError, match=match):
        call(bias(t))
    assert t.writes == []


def test_bias_without_limits_cannot_be_built():
    with pytest.raises(SafetyLimitError):
        BiasSupply(
            ScpiSession(ScriptedTransport()), GENERIC, InstrumentSpec(role="bias", address="X")
        )


def test_bias_output_on_is_never_reapplied_but_off_is():
    t = ScriptedTransport().expect(configured("OUTPut:STATe OFF"), configured("OUTPut:STATe ON"))
    b = bias(t)
    b.set_output(False)
    assert b.session.cached_settings == ["OUTPut:STATe OFF"]
    b.set_output(True)
    assert b.session.cached_settings == []


# -- switch ---------------------------------------------------------------------------------------
def test_switch_route_inject_and_query():
    t = ScriptedTransport().expect(
        configured("ROUTe:CLOSe (@1203)"),
        configured("ROUTe:CLOSe (@2312)"),
        configured("ROUTe:CLOSe (@103)"),
        ("ROUTe:CLOSe? (@1203,2312,103,1103)", b"1,1,1,0\n"),
        configured("ROUTe:OPEN:ALL"),
        configured("ROUTe:OPEN (@1203)"),
    )
    sw = build(Switch, t)
    sw.route(3, "x5", 1)
    sw.route(12, "shaped", 2)
    sw.inject(3)
    assert sw.closed([1203, 2312, 103, 1103]) == [True, True, True, False]
    assert len(sw.session.cached_settings) == 3
    sw.open_all()
    assert sw.session.cached_settings == []
    sw.open_channels([1203])
    t.assert_done()
    with pytest.raises(ValueError, match="unknown board output"):
        sw.route(1, "x10", 1)


def test_channel_list_numbers_follow_the_dialect_header():
    # dialect header: 1000*i + 100*k + c; injection 100 + c
    assert route_number(3, 2, 1) == 1203
    assert injection_number(7) == 107
    assert parse_channel_list("(@1203,103)") == [1203, 103]
    assert parse_channel_list("(@1:4,7)") == [1, 2, 3, 4, 7]
    with pytest.raises(ValueError):
        parse_channel_list("1,2")


# -- coincidence ----------------------------------------------------------------------------------
def test_coincidence_window_delays_thresholds_and_one_gate():
    t = ScriptedTransport(timeout_ms=1000).expect(
        configured("SENSe:COINcidence:WINDow 5e-08"),
        configured("INPut1:DELay 0"),
        configured("INPut2:DELay 1.25e-08"),
        configured("INPut1:DELay 3e-09"),
        configured("INPut2:DELay 0"),
        configured("INPut2:THReshold -0.03"),
        configured("SENSe:GATE:TIME 2"),
        configured("INITiate:IMMediate"),
        ("FETCh:COINcidence?", b"17,1000,2003\n"),
    )
    unit = build(CoincidenceUnit, t)
    unit.set_window(50.0)
    unit.set_relative_delay(12.5)  # input 2 later by 12.5 ns
    unit.set_relative_delay(-3.0)  # input 1 later by 3 ns
    unit.set_threshold(2, -30.0)
    unit.set_gate(2.0)
    counts = unit.count()
    assert (counts.coincidences, counts.singles, counts.gate_s) == (17, (1000, 2003), 2.0)
    assert counts.coincidence_rate_hz == pytest.approx(8.5)
    assert counts.singles_rate_hz == pytest.approx((500.0, 1001.5))
    fetch_timeout = t.timeouts_at_write[t.writes.index("FETCh:COINcidence?")]
    assert fetch_timeout > 2000  # the fetch waits for the gate


@pytest.mark.parametrize(
    "reply", [b"1,2\n", b"5,3,10\n", b"1.5,10,10\n", b"-1,10,10\n", b"9.91E+37,10,10\n"]
)
def test_coincidence_refuses_short_or_inconsistent_counts(reply):
    t = ScriptedTransport().expect(
        ("SENSe:GATE:TIME?", b"1\n"),
        configured("INITiate:IMMediate"),
        ("FETCh:COINcidence?", reply),
    )
    with pytest.raises(ProtocolError):
        build(CoincidenceUnit, t).count()


def test_coincidence_without_thresholds_refuses_set_threshold_and_checks_ranges():
    text = GENERIC_TEXT.replace(
        '    set_threshold: {write: "INPut{input:d}:THReshold {volts:.9g}"}', ""
    )
    assert text != GENERIC_TEXT
    dialect = parse_dialect(text, "no-thresholds.yaml")
    t = ScriptedTransport()
    unit = CoincidenceUnit(ScpiSession(t), dialect, None)
    with pytest.raises(ValueError, match="no input thresholds"):
        unit.set_threshold(1, 10.0)
    with pytest.raises(ValueError, match="input"):
        unit.set_delay(3, 1.0)
    with pytest.raises(ValueError):
        unit.set_window(0.0)
    with pytest.raises(ValueError):
        unit.set_delay(1, 2000.0)
    assert t.writes == []
