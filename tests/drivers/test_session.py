"""The SCPI layer over a scripted transport, with byte-literal exchanges.

Block format: IEEE Std 488.2-1992 §8.7.9 definite/indefinite length arbitrary block response data
(clause number from memory).  Error queue: SCPI-1999 vol. 2 §21 (SYSTem:ERRor[:NEXT]? returns
``<code>,"<message>"``, 0 = no error; codes -113 "Undefined header", -222 "Data out of range" from
the standard's table, from memory).  Expected arrays are built with numpy's own big-endian dtype.
"""

import numpy as np
import pytest

from drivers.errors import (
    ConnectionClosed,
    InstrumentError,
    InstrumentTimeout,
    ProtocolError,
    ReadStopped,
)
from drivers.scpi.session import Identity, ScpiSession, parse_error_entry, parse_identity
from tests.drivers.scripted import ERRQ, OK, ScriptedTransport, configured, resync


def session(t: ScriptedTransport, **kw) -> ScpiSession:
    return ScpiSession(t, **kw)


def be16(values) -> bytes:
    return np.asarray(values, dtype=">i2").tobytes()  # numpy reference encoder, big-endian


def test_identify_splits_four_fields():
    t = ScriptedTransport().expect(("*IDN?", b"Nordlicht Instruments,PG-7,NR-PG-0042,1.2.3\n"))
    ident = session(t).identify()
    assert ident == Identity(
        "Nordlicht Instruments",
        "PG-7",
        "NR-PG-0042",
        "1.2.3",
        "Nordlicht Instruments,PG-7,NR-PG-0042,1.2.3",
    )
    t.assert_done()


def test_identity_with_missing_and_extra_fields():
    assert parse_identity("ACME,X1").serial == ""
    assert parse_identity("ACME,X1,S1,fw 1.0,build 7").firmware == "fw 1.0,build 7"
    with pytest.raises(ProtocolError):
        parse_identity("  ")


def test_write_drains_error_queue_until_zero():
    t = ScriptedTransport().expect(configured("SOURce:FREQuency:CW 1000"))
    session(t).write("SOURce:FREQuency:CW 1000")
    assert t.writes == ["SOURce:FREQuency:CW 1000", ERRQ]
    t.assert_done()


def test_several_queued_errors_raise_the_first_naming_the_command():
    t = ScriptedTransport().expect(
        ("SOURce:VOLTage 99", None),
        (ERRQ, b'-222,"Data out of range"\n'),
        (ERRQ, b'-113,"Undefined header"\n'),
        (ERRQ, OK),
    )
    with pytest.raises(InstrumentError) as exc:
        session(t).write("SOURce:VOLTage 99")
    err = exc.value
    assert err.code == -222 and err.instrument_message == "Data out of range"
    assert err.command == "SOURce:VOLTage 99" and "SOURce:VOLTage 99" in str(err)
    assert err.queued == [(-222, "Data out of range"), (-113, "Undefined header")]
    t.assert_done()


def test_error_entry_parsing():
    assert parse_error_entry('+0,"No error"') == (0, "No error")
    assert parse_error_entry('-100,"Command error; ""x"" unknown"') == (
        -100,
        'Command error; "x" unknown',
    )
    with pytest.raises(ProtocolError):
        parse_error_entry("garbage")


def test_nine_digit_header_block_with_newline_bytes_inside():
    values = [10, 2560, -1, 0x0A0A]  # 0x000A, 0x0A00, 0xFFFF, 0x0A0A: five 0x0A bytes in the data
    payload = be16(values)
    t = ScriptedTransport().expect(("TRACe:DATA? CHANnel1", b"#9000000008" + payload + b"\n"))
    arr = session(t).query_block("TRACe:DATA? CHANnel1", kind="int16", big_endian=True)
    np.testing.assert_array_equal(arr, np.frombuffer(payload, dtype=">i2"))
    assert arr.dtype == np.dtype("int16")
    t.assert_done()


def test_block_split_over_several_reads():
    payload = be16(range(-5, 5))  # 20 bytes
    chunks = [b"#", b"2", b"2", b"0" + payload[:3], payload[3:11], payload[11:], b"\n"]
    t = ScriptedTransport().expect(("TRACe:DATA? CHANnel2", chunks))
    arr = session(t).query_block("TRACe:DATA? CHANnel2")
    assert arr.tolist() == list(range(-5, 5))
    assert t.chunks_read >= len(chunks)


def test_little_endian_block_when_the_dialect_says_swapped():
    payload = np.asarray([1, 256], dtype="<i2").tobytes()
    t = ScriptedTransport().expect(("D?", b"#14" + payload + b"\n"))
    assert session(t).query_block("D?", big_endian=False).tolist() == [1, 256]


def test_indefinite_block_keeps_embedded_terminators():
    payload = be16([10, 2560, 7])  # 00 0A 0A 00 00 07
    t = ScriptedTransport().expect(("D?", [b"#0", payload + b"\n"]))
    assert session(t).query_block("D?").tolist() == [10, 2560, 7]


def test_truncated_block_times_out_then_resynchronises_and_retries():
    full = b"#18" + be16([1, 2, 3, 4]) + b"\n"
    t = ScriptedTransport().expect(("D?", full[:7]), *resync(), ("D?", full))
    s = session(t)
    assert s.query_block("D?").tolist() == [1, 2, 3, 4]
    assert t.events[1] == "drain"  # stray input discarded before *CLS, *OPC?
    t.assert_done()


def test_truncated_block_without_retry_raises_and_next_call_resyncs():
    t = ScriptedTransport().expect(("D?", b"#18\x00\x01"), *resync(), ("X?", b"5\n"))
    s = session(t, retries=0)
    with pytest.raises(InstrumentTimeout):
        s.query_block("D?")
    assert s.query_float("X?") == 5.0
    assert t.writes == ["D?", "*CLS", "*OPC?", "X?"]


@pytest.mark.parametrize("reply", [b"ABCDEF\n", b"#x12\n", b"#3a0\n"])
def test_malformed_header_is_rejected(reply):
    t = ScriptedTransport().expect(("D?", reply))
    with pytest.raises(ProtocolError):
        session(t, retries=0).query_block("D?")


def test_declared_size_above_the_cap_is_rejected():
    t = ScriptedTransport().expect(("D?", b"#41000" + bytes(1000) + b"\n"))
    with pytest.raises(ProtocolError, match="cap"):
        session(t, retries=0, max_block_bytes=100).query_block("D?")


def test_block_bounds_kept_between_reads_follow_the_cap_the_timeout_and_the_stop_check():
    """The session keeps one bounds record while what it is made of stays the same; a new cap,
    link timeout or stop check is in force from the next block read on."""
    block = ("D?", b"#18" + be16([1, 2, 3, 4]) + b"\n")
    t = ScriptedTransport().expect(block, block, *resync(), block, block, *resync(), block)
    s = session(t, retries=0)
    assert s.query_block("D?").tolist() == [1, 2, 3, 4]
    s.max_block_bytes = 4  # smaller than the 8 bytes announced
    with pytest.raises(ProtocolError, match="cap of 4"):
        s.query_block("D?")
    s.max_block_bytes = 1024
    assert s.query_block("D?").tolist() == [1, 2, 3, 4]  # after the resync
    s.stop_check = lambda: True
    with pytest.raises(ReadStopped):
        s.query_block("D?")
    s.stop_check = None
    t.timeout_ms = 2000
    assert s.query_block("D?").tolist() == [1, 2, 3, 4]
    assert s._block_bounds().timeout_s == 2.0 and s._block_bounds().stop is None
    t.assert_done()


def test_bytes_after_a_definite_block_are_an_error():
    t = ScriptedTransport().expect(("D?", b"#12\x00\x01junk\n"))
    with pytest.raises(ProtocolError, match="after the binary block"):
        session(t, retries=0).query_block("D?")


def test_query_timeout_is_retried_once_then_raised_with_address():
    t = ScriptedTransport(address="TCPIP0::10.0.0.9::5025::SOCKET").expect(
        ("MEASure:VOLTage:DC?", None), *resync(), ("MEASure:VOLTage:DC?", None)
    )
    with pytest.raises(InstrumentTimeout) as exc:
        session(t).query_float("MEASure:VOLTage:DC?")
    assert "10.0.0.9" in str(exc.value)
    t.assert_done()


def test_garbled_number_is_retried_after_resync():
    t = ScriptedTransport().expect(("V?", b"1.2.3\n"), *resync(), ("V?", b"+1.250000E+00\n"))
    assert session(t).query_float("V?") == 1.25


def test_actions_are_not_retried():
    t = ScriptedTransport().expect(("*TRG", None), (ERRQ, None))
    with pytest.raises(InstrumentTimeout):
        session(t).write("*TRG", reapply=False)
    t.assert_done()


def test_wait_complete_uses_its_own_timeout_and_restores_it():
    t = ScriptedTransport(timeout_ms=2000).expect(("*OPC?", b"1\n"))
    session(t, opc_timeout_ms=30_000).wait_complete()
    assert t.timeouts_at_write == [30_000] and t.timeout_ms == 2000


def test_dropped_link_reconnects_reapplies_settings_but_not_output_on():
    t = ScriptedTransport().expect(
        configured("SOURce:VOLTage:SLEW 5"),
        configured("OUTPut:STATe ON"),
        ("MEASure:VOLTage:DC?", ConnectionClosed("peer closed", address="SCRIPT::1")),
        *resync(),
        configured("SOURce:VOLTage:SLEW 5"),
        ("MEASure:VOLTage:DC?", b"4.99\n"),
    )
    s = session(t)
    s.write("SOURce:VOLTage:SLEW 5")
    s.write("OUTPut:STATe ON", reapply=False)
    assert s.query_float("MEASure:VOLTage:DC?") == pytest.approx(4.99)
    assert "reconnect" in t.events
    assert "OUTPut:STATe ON" not in t.writes[t.events.index("reconnect") :]
    t.assert_done()


def test_failed_reconnect_raises_and_is_tried_again_next_call():
    t = ScriptedTransport(reconnect_failures=1).expect(
        ("A?", ConnectionClosed("gone", address="SCRIPT::1")), *resync(), ("A?", b"1\n")
    )
    s = session(t, retries=0)
    with pytest.raises(ConnectionClosed):
        s.query("A?")
    with pytest.raises(Exception, match="reconnect failed"):
        s.query("A?")
    assert s.query("A?") == "1"
    assert t.events.count("reconnect") == 2


def test_error_queue_that_never_empties_is_a_protocol_error():
    t = ScriptedTransport().expect(("X 1", None), *[(ERRQ, b'-350,"Queue overflow"\n')] * 64)
    with pytest.raises(ProtocolError, match="not empty"):
        session(t, retries=0).write("X 1")


def test_errors_returns_the_drained_queue():
    t = ScriptedTransport().expect((ERRQ, b'-113,"Undefined header"\n'), (ERRQ, OK))
    assert session(t).errors() == [(-113, "Undefined header")]


def test_link_lost_on_the_error_check_names_the_command_before_it():
    # The link drops while the error queue is read after INITiate: the news is the INITiate (an
    # action, not retried), and the error-queue query is named as the check that failed.
    t = ScriptedTransport().expect(
        ("INITiate:IMMediate", None),
        ("SYSTem:ERRor:NEXT?", ConnectionClosed("peer closed", address="SCRIPT::1")),
    )
    s = session(t)
    with pytest.raises(ConnectionClosed) as caught:
        s.write("INITiate:IMMediate", reapply=False)
    err = caught.value
    assert err.after == "INITiate:IMMediate" and err.address == "SCRIPT::1"
    assert "checking the error queue after 'INITiate:IMMediate'" in str(err)
    t.assert_done()


def test_no_reply_to_the_error_check_names_the_command_before_it():
    t = ScriptedTransport().expect(("TRIGger:SEQuence:SOURce EXTernal", None), (ERRQ, None))
    s = session(t, retries=0)
    with pytest.raises(InstrumentTimeout) as caught:
        s.write("TRIGger:SEQuence:SOURce EXTernal")
    assert caught.value.after == "TRIGger:SEQuence:SOURce EXTernal"
    assert caught.value.command == ERRQ
