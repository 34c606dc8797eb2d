"""Status words that drive safety flags (a trip or interlock bit) are refused when they cannot be a
status register's contents."""

import pytest

from drivers.scpi.replies import ReplyRule, parse_reply


def test_a_status_bit_is_never_read_from_scpi_not_a_number():
    # A supply whose trip flag is a bit of a status word: 9.91E+37 (SCPI's NAN, SCPI-1999 Vol. 1
    # 7.2.1.5, from memory) has whatever bits the float happens to have; it must be refused, not
    # read as "not tripped".
    assert parse_reply("4", "bool", ReplyRule(bit=2)) is True  # control: bit 2 of 4
    for reply in ("9.91E+37", "1e10", "-1", "NAN"):
        with pytest.raises(ValueError, match="not a status word"):
            parse_reply(reply, "bool", ReplyRule(bit=2))
