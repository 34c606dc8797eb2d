"""The scope keeps its preamble while nothing that shapes it changed (drivers/roles/preamble_cache.py).

Byte-literal, over the scripted link: every message the driver sends is asserted, so a preamble
read again shows up as one more ``TRACe:PREamble?`` exchange and a kept one as its absence.  The
rule checked is issue 21 item 3's "the driver knows the instrument state it set and skips
unchanged settings": a changed setting re-reads the preamble, an unchanged one (not even sent,
drivers/scpi/messages.py skip_unchanged) does not.  Program-message syntax: IEEE 488.2 §7.3 (units
joined by ';'), from memory.  Decoded volts are checked by hand: code x y_increment + y_origin.
"""

from __future__ import annotations

import textwrap

import pytest

from drivers.bench import InstrumentSpec
from drivers.dialect import load_dialect, parse_dialect
from drivers.errors import ConfigError, InstrumentError
from drivers.roles import Scope
from drivers.scpi.session import ScpiSession
from tests.drivers.scripted import ERRQ, ScriptedTransport, resync

OK = b'0,"No error"\n'
PRE1 = ("TRACe:PREamble? CHANnel1", b"1E-9,0,1E-3,0,2,1\n")  # 1 ns, 1 mV per code, 2 points
DATA1 = ("TRACe:DATA? CHANnel1", b"#14\x00\x05\xff\xfe\n")  # int16 big-endian: 5, -2


def joined(*units: str) -> str:
    return ";:".join([*units, ERRQ])


def opened() -> list[tuple[str, object]]:
    return [(joined("FORMat:BORDer NORMal"), OK), (joined("FORMat:DATA INTeger,16"), OK)]


def input1(range_V: str) -> tuple[str, bytes]:
    return joined(f"SENSe:VOLTage1:RANGe:UPPer {range_V}", "SENSe:VOLTage1:OFFSet 0"), OK


def scope_on(link: ScriptedTransport, dialect=None) -> Scope:
    dialect = dialect or load_dialect("generic")
    session = ScpiSession(link, policy=dialect.messages)
    return Scope(session, dialect, InstrumentSpec(role="scope", address=link.address))


ACQUIRE = (f"INITiate:IMMediate;*OPC?;:{ERRQ}", b'1;0,"No error"\n')


def test_an_unchanged_setting_keeps_the_preamble_and_a_changed_one_reads_it_again():
    link = ScriptedTransport().expect(
        opened(),
        input1("0.1"),
        ACQUIRE, PRE1, DATA1,   # first capture: the preamble is read
        ACQUIRE, DATA1,         # same settings: the data alone
        ACQUIRE, DATA1,         # the same range written again is not sent: still the data alone
        (joined("SENSe:VOLTage1:RANGe:UPPer 0.2"), OK),  # a changed range goes out ...
        ACQUIRE, ("TRACe:PREamble? CHANnel1", b"1E-9,0,2E-3,0,2,1\n"), DATA1,  # ... and the preamble
    )  # fmt: skip
    scope = scope_on(link)
    scope.set_input(1, range_mV=100)
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.005, -0.002])
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.005, -0.002])
    scope.set_input(1, range_mV=100)
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.005, -0.002])
    scope.set_input(1, range_mV=200)
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.010, -0.004])  # 2 mV a code
    link.assert_done()
    assert (scope.preambles.reads, scope.preambles.hits) == (2, 2)
    assert scope.session.skipped == 3  # range and offset, then the offset: unchanged


def test_a_preamble_read_before_the_next_acquisition_is_not_kept():
    # A preamble describes the record last acquired: read after a new range but before the next
    # acquisition it still has the old scaling, and keeping it would mis-scale every later capture
    link = ScriptedTransport().expect(
        opened(),
        ACQUIRE, PRE1, DATA1,
        (joined("SENSe:VOLTage1:RANGe:UPPer 0.2"), OK),
        PRE1, DATA1,            # the old record again, with its old preamble: not kept ...
        ACQUIRE, ("TRACe:PREamble? CHANnel1", b"1E-9,0,2E-3,0,2,1\n"), DATA1,  # ... read anew
        ACQUIRE, DATA1,         # and this one, read after the acquisition, is kept
    )  # fmt: skip
    scope = scope_on(link)
    scope.capture([1])
    scope.session.write("SENSe:VOLTage1:RANGe:UPPer 0.2")  # even a raw write counts
    assert scope.fetch(1).volts.tolist() == pytest.approx([0.005, -0.002])
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.010, -0.004])
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.010, -0.004])
    link.assert_done()


def test_acquisitions_keep_it_and_every_other_setting_drops_it_by_default():
    link = ScriptedTransport().expect(
        opened(),
        ACQUIRE, PRE1, DATA1,
        ACQUIRE, DATA1,                                  # INIT changes no setting
        (joined("TRIGger:SEQuence:SOURce EXTernal", "TRIGger:SEQuence:LEVel 0.05"), OK),
        ACQUIRE, PRE1, DATA1,                            # the generic dialect lists nothing: safe
    )  # fmt: skip
    scope = scope_on(link)
    scope.capture([1])
    scope.capture([1])
    scope.set_trigger("EXTernal", 50)
    scope.capture([1])
    link.assert_done()


LAB = textwrap.dedent(
    """\
    dialect: lab
    format: 2
    messages: {skip_unchanged: true, join: true}
    roles:
      scope:
        set_range: {write: "CHAN{input:d}:RANG {volts:.9g}"}
        set_offset: {write: "CHAN{input:d}:OFFS {volts:.9g}"}
        set_trigger_source: {write: "TRIG:SOUR {source}"}
        set_trigger_level: {write: "TRIG:LEV {volts:.9g}"}
        set_average_count: {write: "ACQ:COUN {count:d}"}
        acquire: {write: "INIT"}
        waveform:
          select: "WAV:SOUR CHAN{input:d}"
          preamble:
            query: "WAV:PRE?"
            fields: {x_increment: 1, y_increment: 2, points: 3}
            affected_by: [set_range, set_offset, set_average_count]
          data: {query: "WAV:DATA?", kind: int8}
    """
)


INIT = ("INIT;*OPC?;:" + ERRQ, b'1;0,"No error"\n')
SELECT1, SELECT2 = (joined("WAV:SOUR CHAN1"), OK), (joined("WAV:SOUR CHAN2"), OK)
PRE_A, DATA_A = ("WAV:PRE?", b"1E-9,0.5,1\n"), ("WAV:DATA?", b"#11\x02\n")


def test_a_dialect_names_the_settings_that_shape_it_and_the_selection_is_kept():
    link = ScriptedTransport().expect(
        INIT, SELECT1, PRE_A, DATA_A,
        (joined("TRIG:SOUR EXTernal", "TRIG:LEV 0.1"), OK),  # not listed: preamble kept
        INIT, DATA_A,
        SELECT2, ("WAV:PRE?", b"1E-9,0.25,1\n"), DATA_A,
        SELECT1, DATA_A,                # input 1's preamble kept while input 2 was selected
        (joined("ACQ:COUN 4"), OK),     # listed: everything kept is dropped, the selection too
        INIT, SELECT1, PRE_A, DATA_A,
    )  # fmt: skip
    scope = scope_on(link, parse_dialect(LAB, "lab.yaml"))
    assert scope.capture([1])[0].volts.tolist() == [1.0]  # 2 codes x 0.5 V
    scope.set_trigger("EXTernal", 100)
    assert scope.capture([1, 2])[1].volts.tolist() == [0.5]  # its own scaling, 0.25 V per code
    assert scope.fetch(1).volts.tolist() == [1.0]
    scope.set_averages(4)
    assert scope.capture([1])[0].volts.tolist() == [1.0]
    link.assert_done()


def test_an_error_and_a_resync_drop_it():
    link = ScriptedTransport().expect(
        INIT, SELECT1, PRE_A, DATA_A,
        (joined("TRIG:SOUR EXTernal", "TRIG:LEV 0.1"), b'-222,"Data out of range"\n'),
        (ERRQ, OK),
        INIT, SELECT1, PRE_A,         # everything asked again after the error ...
        ("WAV:DATA?", b"#11\x02"),    # ... the block's terminator never comes: a timeout
        resync(),                     # the retry resynchronises first
        DATA_A,
        INIT, SELECT1, PRE_A, DATA_A,  # the resync made the state unknown: asked again
        INIT, DATA_A,                  # and now kept
    )  # fmt: skip
    scope = scope_on(link, parse_dialect(LAB, "lab.yaml"))
    scope.capture([1])
    with pytest.raises(InstrumentError, match="Data out of range"):
        scope.set_trigger("EXTernal", 100)
    scope.capture([1])
    scope.capture([1])
    scope.capture([1])
    link.assert_done()
    assert scope.session.resyncs == 1


def test_cache_false_reads_it_for_every_capture():
    text = LAB.replace("affected_by: [set_range, set_offset, set_average_count]", "cache: false")
    link = ScriptedTransport().expect(
        INIT, SELECT1, PRE_A, DATA_A, INIT, SELECT1, PRE_A, DATA_A,
    )  # fmt: skip
    scope = scope_on(link, parse_dialect(text, "lab.yaml"))
    scope.capture([1])
    scope.capture([1])
    link.assert_done()


def test_affected_by_names_operations_of_the_role():
    bad = LAB.replace("set_average_count]", "set_avrage_count]")
    with pytest.raises(ConfigError) as exc:
        parse_dialect(bad, "lab.yaml")
    text = str(exc.value)
    assert "lab.yaml:17:" in text and "unknown operation set_avrage_count" in text
    with pytest.raises(ConfigError, match="cache must be true or false"):
        parse_dialect(LAB.replace("affected_by: [set_range, set_offset, set_average_count]",
                                  "cache: maybe"), "lab.yaml")  # fmt: skip


def test_plain_messages_an_acquisition_and_a_chunk_range_keep_it():
    # wavescope: no joining, no skipping (each write then its own error query), a source select
    # and a chunk range before every data request; uint16 low byte first, 1 mV per code
    acquire = [("SINGle", None), (ERRQ, OK), ("*OPC?", b"1\n")]
    chunk = [("WAVeform:STARt 1;:WAVeform:STOP 2", None), (ERRQ, OK)]
    data = ("WAVeform:DATA?", b"#14\x05\x00\x02\x00\n")
    link = ScriptedTransport().expect(
        ("WAVeform:FORMat WORD", None), (ERRQ, OK), ("WAVeform:BYTeorder LSBFirst", None), (ERRQ, OK),
        acquire, ("WAVeform:SOURce CHANnel1", None), (ERRQ, OK),
        ("WAVeform:PREamble?", b"1,0,2,1,1E-9,0,0,1E-3,0,0\n"), chunk, data,
        acquire, chunk, data,   # the same source, no setting written: no select, no preamble
    )  # fmt: skip
    scope = scope_on(link, load_dialect("wavescope"))
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.005, 0.002])
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.005, 0.002])
    link.assert_done()


FORMAT_1 = textwrap.dedent(
    """\
    dialect: lab1
    binary: {data_format: 'INTeger,16', kind: int16, byte_order: big}
    roles:
      scope:
        set_range: {write: "RANG{input:d} {volts:.9g}"}
        set_offset: {write: "OFFS{input:d} {volts:.9g}"}
        set_data_format: {write: "FORM {kind}"}
        acquire: {write: "INIT"}
        preamble: {query: "PRE? {input:d}", returns: csv}
        fetch: {query: "DATA? {input:d}", returns: block}
    """
)


def test_a_format_1_dialect_keeps_it_until_any_write():
    # x_increment, x_origin, y_increment, y_origin, points, averages; one int16 code of 100
    plain_init = [("INIT", None), (ERRQ, OK), ("*OPC?", b"1\n")]
    pre, data = ("PRE? 1", b"1e-9,0,0.001,0,1,1\n"), ("DATA? 1", b"#12\x00\x64\n")
    link = ScriptedTransport().expect(
        ("FORM INTeger,16", None), (ERRQ, OK),
        plain_init, pre, data,
        plain_init, data,
        ("RANG1 0.1", None), (ERRQ, OK), ("OFFS1 0", None), (ERRQ, OK),  # sent: no tracking
        plain_init, ("PRE? 1", b"1e-9,0,0.002,0,1,1\n"), data,
    )  # fmt: skip
    scope = scope_on(link, parse_dialect(FORMAT_1, "lab1.yaml"))
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.1])
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.1])
    scope.set_input(1, range_mV=100)
    assert scope.capture([1])[0].volts.tolist() == pytest.approx([0.2])
    link.assert_done()
