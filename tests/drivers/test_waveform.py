"""Waveform calibration as data: byte-literal records, references, byte orders, ASCII, chunks.

The calibration rule is the common form of scope preambles (issue 14):
``volts = (code - y_reference) * y_increment + y_origin``, ``t = (i - x_reference) * x_increment +
x_origin``.  Expected values are worked by hand next to each check; element decoding is checked
against numpy's own dtype semantics (the reference library).
"""

import textwrap

import numpy as np
import pytest

from drivers.benchfile import InstrumentSpec
from drivers.dialect import parse_dialect
from drivers.errors import ConfigError, ProtocolError
from drivers.roles.scope import Scope
from drivers.scpi.session import ScpiSession
from drivers.scpi.waveform import (
    DataFormat,
    calibrate,
    chunk_ranges,
    decode_codes,
    preamble_by_position,
    preamble_from,
)
from tests.drivers.scripted import ScriptedTransport, configured


def test_unsigned_bytes_with_a_y_reference():
    # uint8 codes 0x80, 0x81, 0x7F, 0xFF with y_reference 128, 4 mV per code, origin 0:
    # (128-128)*4 mV = 0, (129-128)*4 = +4 mV, (127-128)*4 = -4 mV, (255-128)*4 = +508 mV.
    # Read as signed int8 without the reference, 0x80 would be -512 mV: the "silently wrong
    # volts" of issue 14 come from exactly that mix-up.
    codes = decode_codes(b"\x80\x81\x7f\xff", DataFormat(kind="uint8"))
    pre = preamble_from({"x_increment": 1e-9, "y_increment": 4e-3, "y_reference": 128})
    assert calibrate(codes, pre).tolist() == pytest.approx([0.0, 0.004, -0.004, 0.508])


def test_unsigned_words_in_both_byte_orders():
    # 0x8000 = 32768 and 0x8010 = 32784; little-endian sends the low byte first
    big = decode_codes(b"\x80\x00\x80\x10", DataFormat(kind="uint16", big_endian=True))
    little = decode_codes(b"\x00\x80\x10\x80", DataFormat(kind="uint16", big_endian=False))
    assert big.tolist() == little.tolist() == [32768, 32784]
    pre = preamble_from({"x_increment": 1e-9, "y_increment": 1e-4, "y_reference": 32768,
                         "y_origin": 0.25})  # fmt: skip
    # (32784 - 32768) * 0.1 mV + 250 mV = 251.6 mV
    assert calibrate(little, pre).tolist() == pytest.approx([0.25, 0.2516])


@pytest.mark.parametrize(
    "kind", ["int8", "uint8", "int16", "uint16", "int32", "float32", "float64"]
)
@pytest.mark.parametrize("big", [True, False])
def test_every_data_kind_decodes_as_numpy_reads_it(kind, big):
    values = np.array([0, 1, 100, 7], dtype=kind)
    wire = values.astype(np.dtype(kind).newbyteorder(">" if big else "<")).tobytes()
    decoded = decode_codes(wire, DataFormat(kind=kind, big_endian=big))
    assert decoded.astype(float).tolist() == [0.0, 1.0, 100.0, 7.0]


def test_ascii_data_and_a_partial_element_is_refused():
    codes = decode_codes(b"1.5E-02, -2.0E-03,0", DataFormat(kind="float64", ascii=True))
    assert codes.tolist() == [0.015, -0.002, 0.0]
    with pytest.raises(ValueError, match="whole number"):
        decode_codes(b"\x00\x01\x02", DataFormat(kind="int16"))
    with pytest.raises(ValueError):
        decode_codes(b"1,2,9.91E+37", DataFormat(kind="float64", ascii=True))  # overrange code


@pytest.mark.parametrize("kind", ["float32", "float64"])
def test_float_records_holding_nan_or_infinity_are_refused(kind):
    # IEEE 754 binary32/binary64 NaN and +inf, big-endian as numpy encodes them: not measurements
    pre = preamble_from({"x_increment": 1e-9, "y_increment": 1.0})
    for bad in (np.nan, np.inf):
        payload = np.array([0.5, bad], dtype=">f4" if kind == "float32" else ">f8").tobytes()
        with pytest.raises(ValueError, match="non-finite"):
            calibrate(decode_codes(payload, DataFormat(kind=kind)), pre)


def test_x_reference_moves_the_first_sample():
    # t0 = (0 - x_reference) * x_increment + x_origin = -500 * 1 ns + 0 = -500 ns
    pre = preamble_by_position(["2", "0", "1000", "1", "1E-9", "0", "500", "0.01", "0", "128"],
                               {"points": 3, "x_increment": 5, "x_origin": 6, "x_reference": 7,
                                "y_increment": 8, "y_origin": 9, "y_reference": 10})  # fmt: skip
    assert pre.t0_s == pytest.approx(-5e-7) and pre.points == 1000
    assert pre.y_reference == 128


def test_preambles_that_would_give_wrong_volts_are_refused():
    with pytest.raises(ValueError, match="y_increment is 0"):
        preamble_from({"x_increment": 1e-9, "y_increment": 0})
    with pytest.raises(ValueError, match="not positive"):
        preamble_from({"x_increment": -1e-9, "y_increment": 1})
    with pytest.raises(ValueError, match="no y_increment"):
        preamble_from({"x_increment": 1e-9})
    with pytest.raises(ValueError, match="record length"):
        preamble_from({"x_increment": 1e-9, "y_increment": 1, "points": 2.5})


def test_chunk_ranges_cover_the_record_once():
    assert chunk_ranges(10, 4) == [(0, 4), (4, 4), (8, 2)]
    assert chunk_ranges(4, 4) == [(0, 4)]
    assert chunk_ranges(0, 4) == []


WAVE_DIALECT = textwrap.dedent(
    """\
    dialect: lab-scope
    format: 2
    roles:
      scope:
        at_open: ["WAVeform:FORMat BYTE", "WAVeform:UNSigned ON"]
        waveform:
          select: "WAVeform:SOURce CHANnel{input}"
          preamble:
            query: "WAVeform:PREamble?"
            fields: {points: 3, x_increment: 5, x_origin: 6, x_reference: 7,
                     y_increment: 8, y_origin: 9, y_reference: 10}
          data: {query: "WAVeform:DATA?", kind: uint8}
          chunks: {max_points: 2, range: "WAVeform:STARt {start};:WAVeform:STOP {stop}"}
    """
)


def test_scope_fetch_in_chunks_with_references_over_the_scripted_link():
    dialect = parse_dialect(WAVE_DIALECT, "lab.yaml")
    t = ScriptedTransport().expect(
        configured("WAVeform:FORMat BYTE"),
        configured("WAVeform:UNSigned ON"),
        configured("WAVeform:SOURce CHANnel2"),
        ("WAVeform:PREamble?", b"0,0,3,1,2.0E-09,-1.0E-07,0,4.0E-03,0.0,128\n"),
        configured("WAVeform:STARt 1;:WAVeform:STOP 2"),
        ("WAVeform:DATA?", b"#12\x80\x81\n"),
        configured("WAVeform:STARt 3;:WAVeform:STOP 3"),
        ("WAVeform:DATA?", b"#11\x7f\n"),
    )
    scope = Scope(ScpiSession(t), dialect, InstrumentSpec(role="scope", address=t.address))
    trace = scope.fetch(2)
    # (128-128)*4 mV, (129-128)*4 mV, (127-128)*4 mV; t0 = -100 ns, 2 ns apart
    assert trace.volts.tolist() == pytest.approx([0.0, 0.004, -0.004])
    assert (trace.dt_s, trace.t0_s, trace.source) == (2e-9, -1e-7, "CHAN2")
    t.assert_done()


def test_a_short_chunk_is_refused():
    dialect = parse_dialect(WAVE_DIALECT, "lab.yaml")
    t = ScriptedTransport().expect(
        configured("WAVeform:FORMat BYTE"),
        configured("WAVeform:UNSigned ON"),
        configured("WAVeform:SOURce CHANnel1"),
        ("WAVeform:PREamble?", b"0,0,3,1,2.0E-09,0,0,4.0E-03,0.0,128\n"),
        configured("WAVeform:STARt 1;:WAVeform:STOP 2"),
        ("WAVeform:DATA?", b"#11\x80\n"),
    )
    scope = Scope(ScpiSession(t), dialect, InstrumentSpec(role="scope", address=t.address))
    with pytest.raises(ProtocolError, match="asked for 2 points, got 1"):
        scope.fetch(1)


def test_preamble_from_several_queries_and_ascii_data():
    text = textwrap.dedent(
        """\
        dialect: lab-scope
        format: 2
        roles:
          scope:
            waveform:
              preamble:
                queries: {x_increment: "WAV:XINC?", y_increment: "WAV:YINC?",
                          y_origin: "WAV:YOR?", y_reference: "WAV:YREF?"}
              data: {query: "WAV:DATA? {input}", encoding: ascii}
        """
    )
    t = ScriptedTransport().expect(
        ("WAV:XINC?", b"1E-9\n"), ("WAV:YINC?", b"0.5\n"), ("WAV:YOR?", b"0.1\n"),
        ("WAV:YREF?", b"2\n"), ("WAV:DATA? 1", b"2,3,1\n"),
    )  # fmt: skip
    scope = Scope(ScpiSession(t), parse_dialect(text, "lab.yaml"))
    # (2-2)*0.5+0.1, (3-2)*0.5+0.1, (1-2)*0.5+0.1
    assert scope.fetch(1).volts.tolist() == pytest.approx([0.1, 0.6, -0.4])


def test_waveform_section_problems_are_located():
    bad = WAVE_DIALECT.replace("y_increment: 8, ", "").replace("kind: uint8", "kind: uint12")
    with pytest.raises(ConfigError) as exc:
        parse_dialect(bad, "lab.yaml")
    text = str(exc.value)
    assert "lab.yaml:10:" in text and "must give y_increment" in text
    assert "lab.yaml:12:" in text and "data kind must be one of" in text


def test_byte_order_at_open_must_agree_with_the_data_declaration():
    text = WAVE_DIALECT.replace(
        '"WAVeform:UNSigned ON"', '"WAVeform:UNSigned ON", "FORMat:BORDer SWAPped"'
    )
    text = text.replace("kind: uint8", "kind: uint16")
    with pytest.raises(ConfigError, match="byte_order disagrees"):
        parse_dialect(text, "lab.yaml")
    assert parse_dialect(text.replace("kind: uint16", "kind: uint16, byte_order: little"), "x")
