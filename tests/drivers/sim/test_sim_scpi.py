"""SCPI header parsing (SCPI-1999 vol. 1 ch. 6-7, from memory: short/long forms, [optional] nodes,
numeric suffixes, ';' chains, channel lists) and the IEEE 488.2 common commands and error queue."""

from __future__ import annotations

import pytest

from drivers.errors import InstrumentError
from drivers.sim.scpi_parser import compile_pattern, parse_channel_list, parse_unit, split_units
from tests.drivers.sim.simkit import make_board, no_errors

PATTERN = compile_pattern("[SOURce#:]VOLTage[:LEVel][:IMMediate][:AMPLitude]")


@pytest.mark.parametrize(
    "header,suffixes",
    [
        ("VOLT", (1,)),
        ("volt", (1,)),
        ("VOLTAGE", (1,)),
        ("SOUR:VOLT", (1,)),
        ("SOUR3:VOLT", (3,)),
        ("source12:voltage:level:immediate:amplitude", (12,)),
        ("VOLT:AMPL", (1,)),
        ("SOURce2:VOLTage:IMM", (2,)),
    ],
)
def test_pattern_accepts_short_long_optional_and_suffix(header, suffixes):
    assert PATTERN.match(header.split(":")) == suffixes


@pytest.mark.parametrize(
    "header", ["VOLTA", "VOL", "SOUR:VOLT:IMM:LEV", "VOLT2", "SOUR:VOLT:AMPL:X", "LEV"]
)
def test_pattern_rejects_partial_forms_wrong_order_and_stray_suffixes(header):
    assert PATTERN.match(header.split(":")) is None


def test_units_split_outside_quotes_and_parentheses():
    assert split_units("ROUT:CLOS (@101,102);*IDN?; ;SYST:ERR?") == [
        "ROUT:CLOS (@101,102)",
        "*IDN?",
        "SYST:ERR?",
    ]
    assert split_units("DISP:TEXT 'a;b';*OPC?") == ["DISP:TEXT 'a;b'", "*OPC?"]
    with pytest.raises(InstrumentError) as exc:
        split_units("ROUT:CLOS (@101")
    assert exc.value.code == -102


def test_unit_parsing_and_channel_lists():
    unit = parse_unit(":FORM:DATA REAL,32")
    assert unit.absolute and unit.words == ("FORM", "DATA") and unit.params == ("REAL", "32")
    assert parse_unit("TRAC:DATA? CHAN2").query
    assert parse_channel_list("(@101,1203:1205, 3301)") == [101, 1203, 1204, 1205, 3301]
    for bad in ("VOLT$ 1", "VOLT 1,,2", "*ID-N?"):
        with pytest.raises(InstrumentError) as exc:
            parse_unit(bad)
        assert exc.value.code == -102


def test_standard_error_codes_over_the_socket(bench_of):
    s = bench_of(make_board())
    p = s.pulser
    cases = {
        "FREQ:CW": -109,  # missing parameter
        "*RST 5": -108,  # parameter not allowed
        "OUTP:STAT ON,OFF": -108,
        "VOLT 99": -222,  # data out of range
        "FREQ zebra": -104,  # data type error
        "TRIG:SOUR NOWHERE": -224,  # illegal parameter value
        "SOUR:VOL:AMPL 1": -113,  # undefined header (VOL is neither VOLT nor VOLTAGE)
        "OUTP$ON": -102,  # syntax error
    }
    for command, code in cases.items():
        p.write(command)
        assert p.query("SYST:ERR?").split(",")[0] == str(code), command
    no_errors(p)


def test_error_queue_overflow_keeps_the_oldest_and_ends_with_350(bench_of):
    s = bench_of(make_board())
    sw = s.switch
    sw.write(";".join(["BAD"] * 25))
    assert sw.query("SYST:ERR:COUN?") == "20"
    entries = [sw.query("SYST:ERR:NEXT?") for _ in range(20)]
    assert entries[:19] == ['-113,"Undefined header"'] * 19
    assert entries[19] == '-350,"Queue overflow"'  # SCPI-1999: the newest entry is replaced
    no_errors(sw)


def test_chains_relative_paths_and_joined_replies(bench_of):
    s = bench_of(make_board())
    p = s.pulser
    # after ';' a header is tried relative to the previous path (SOURce:PULSe:...) then from the root
    p.write("SOUR:PULS:WIDT 2e-8;TRAN:LEAD 3e-9;:OUTP ON")
    assert p.query("SOUR:PULS:WIDT?;TRAN:LEAD?;:OUTP?;*OPC?") == "2e-08;3e-09;1;1"
    p.write("*RST")
    assert p.query("OUTP?;VOLT?") == "0;0.1"
    p.write("*TRG;*WAI")
    assert p.query("*ESR?;*STB?") == "0;0"
    p.write("NOPE")
    assert p.query("*STB?") == "4"  # error queue not empty (IEEE 488.2 EAV bit, from memory)
    p.write("*CLS")
    no_errors(p)


def test_switch_multiplexers_and_route_queries(bench_of):
    s = bench_of(make_board())
    sw = s.switch
    sw.write("ROUTe:CLOSe (@101,1101,2302)")
    assert sw.query("ROUT:CLOS? (@101,1101,2302,102)") == "1,1,1,0"
    sw.write("ROUT:CLOS (@103,1204)")  # 1-of-N: replaces the injection and input 1's route
    assert sw.query("ROUT:CLOS? (@101,103,1101,1204)") == "0,1,0,1"
    sw.write("ROUT:OPEN (@103)")
    assert sw.query("ROUT:OPEN? (@103,1204)") == "1,0"
    sw.write("ROUT:CLOS (@5101)")  # no scope input 5
    assert sw.query("SYST:ERR?") == '-222,"Data out of range"'
    sw.write("ROUT:CLOS (@105)")  # the test board has 4 channels
    assert sw.query("SYST:ERR?") == '-222,"Data out of range"'
    sw.write("ROUT:OPEN:ALL")
    assert sw.query("ROUT:CLOS? (@1204)") == "0"


def test_threshold_suffix_range(bench_of):
    s = bench_of(make_board())
    t = s.threshold
    t.write("SOUR4:VOLT 0.0125;:SOUR2:VOLT -0.003")
    assert t.query("SOUR4:VOLT?;:SOUR2:VOLT?;:SOUR1:VOLT?") == "0.0125;-0.003;0"
    t.write("SOUR5:VOLT 0.01")
    assert t.query("SYST:ERR?") == '-114,"Header suffix out of range"'
