"""Reply rules (drivers.scpi.replies) over literal reply texts, one test per rule."""

import math

import pytest

from drivers.scpi.replies import ReplyRule, parse_number, parse_reply, refuse_codes


def test_header_is_stripped():
    # a reply with the program header on, e.g. ":VOLT 1.0E+00" (SCPI-1999 vol. 1 §4.2, from memory)
    assert parse_reply(":VOLT 1.0E+00", "float", ReplyRule(header=True)) == 1.0
    assert parse_reply("VOLT:LEV 2.5", "float", ReplyRule(header=True)) == 2.5
    with pytest.raises(ValueError, match="no program header"):
        parse_reply("1.0E+00", "float", ReplyRule(header=True))


def test_field_by_position_and_by_name_with_either_separator():
    line = "+1.000000E+01,+2.500000E-06,+9.910000E+37"  # volts, amps, resistance (overrange)
    assert parse_reply(line, "float", ReplyRule(field=1)) == 10.0
    named = ReplyRule(field="amps", fields=("volts", "amps", "ohms"))
    assert parse_reply(line, "float", named) == pytest.approx(2.5e-6)
    assert parse_reply("3;4;5", "int", ReplyRule(field=3, separator=";")) == 5
    with pytest.raises(ValueError, match="field 4"):
        parse_reply(line, "float", ReplyRule(field=4))


def test_overrange_and_nan_pass_through_for_the_caller_to_refuse():
    # SCPI-1999 vol. 1 §7.2.1 (from memory): 9.91E+37 = NaN, 9.9E+37 = infinity; the reply rule
    # reads them as the numbers they are, the role (bias readings) or the waveform rule refuses them
    line = "+1.000000E+01,+2.500000E-06,+9.910000E+37"
    assert parse_reply(line, "float", ReplyRule(field=3)) == 9.91e37
    assert math.isnan(parse_number("NAN")) and parse_number("-INF") == -math.inf
    with pytest.raises(ValueError, match="not a measurement"):
        refuse_codes(parse_number("-9.9E+37"), "reading")
    with pytest.raises(ValueError, match="not a measurement"):
        refuse_codes(parse_number("nan"), "reading")
    assert refuse_codes(1.5, "reading") == 1.5


def test_pattern_capture():
    rule = ReplyRule(pattern=r"LEVEL=([-+0-9.E]+)")
    assert parse_reply("CH1 LEVEL=-0.125 OK", "float", rule) == -0.125
    with pytest.raises(ValueError, match="does not match"):
        parse_reply("CH1 BUSY", "float", rule)


def test_bit_of_a_status_word():
    # 0x0A = 0b1010: bit 1 and bit 3 set, bit 0 and bit 2 clear
    assert parse_reply("10", "bool", ReplyRule(bit=1)) is True
    assert parse_reply("+10", "bool", ReplyRule(bit=3)) is True
    assert parse_reply("10", "bool", ReplyRule(bit=2)) is False
    assert parse_reply("1.0E+01", "bool", ReplyRule(bit=0)) is False
    with pytest.raises(ValueError, match="status word"):
        parse_reply("2.5", "bool", ReplyRule(bit=0))


def test_words_map_and_default_booleans():
    rule = ReplyRule(words={"TRIP": True, "NORM": False})
    assert parse_reply("TRIP", "bool", rule) is True
    assert parse_reply('"norm"', "bool", rule) is False
    with pytest.raises(ValueError, match="none of"):
        parse_reply("OVLD", "bool", rule)
    assert parse_reply("ON", "bool") is True and parse_reply("+0", "bool") is False
    with pytest.raises(ValueError):
        parse_reply("2", "bool")


def test_numbers_with_units_and_si_prefixes():
    # SI prefixes (SCPI-1999 vol. 1 §7.7.3, from memory: M = milli, MA = mega)
    assert parse_reply("200mV", "float", ReplyRule(unit="V")) == pytest.approx(0.2)
    assert parse_reply("1.5E+00 V", "float", ReplyRule(unit="V")) == 1.5
    assert parse_reply("12.5uA", "float", ReplyRule(unit="A")) == pytest.approx(12.5e-6)
    assert parse_reply("3 kHz", "float", ReplyRule(unit="Hz")) == 3000.0
    with pytest.raises(ValueError, match="does not declare"):
        parse_reply("200mV", "float")
    with pytest.raises(ValueError, match="is not 'A'"):
        parse_reply("200mV", "float", ReplyRule(unit="A"))


def test_csv_and_combined_rules():
    assert parse_reply("1,0,1", "csv") == [1.0, 0.0, 1.0]
    # header, then field 2 of a ';' list, then a bit of it
    rule = ReplyRule(header=True, separator=";", field=2, bit=2)
    assert parse_reply(":STAT:QUES 0;4;0", "bool", rule) is True
