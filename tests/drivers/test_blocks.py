"""IEEE 488.2 block encoding and decoding (IEEE Std 488.2-1992 §7.7.6 definite/indefinite length
arbitrary block response data, clause number from memory), checked with byte literals."""

import numpy as np
import pytest

from drivers.errors import ProtocolError
from drivers.scpi.blocks import format_block, parse_block, parse_block_header


def test_definite_block_big_endian_int16_bytes():
    # 1, -2, 256 as big-endian int16 = 00 01 | ff fe | 01 00 ; 6 bytes -> "#16"
    assert format_block(np.array([1, -2, 256]), kind="int16", big_endian=True) == b"#16\x00\x01\xff\xfe\x01\x00"


def test_parse_definite_block_with_terminator():
    arr = parse_block(b"#16\x00\x01\xff\xfe\x01\x00\n", kind="int16", big_endian=True)
    assert arr.tolist() == [1, -2, 256]
    assert arr.dtype.byteorder in ("=", "<", "|")


def test_parse_little_endian():
    assert parse_block(b"#14\x01\x00\x00\x01", kind="int16", big_endian=False).tolist() == [1, 256]


def test_indefinite_block_runs_to_terminator():
    assert parse_block(b"#0\x00\x0a\x00\x02\n", kind="int16").tolist() == [10, 2]


def test_nine_digit_header():
    payload = bytes(4)
    msg = b"#9000000004" + payload
    assert parse_block_header(msg) == (11, 4)
    assert parse_block(msg, kind="int32").tolist() == [0]


def test_truncated_block_is_rejected():
    with pytest.raises(ProtocolError, match="truncated"):
        parse_block(b"#16\x00\x01", kind="int16")


def test_malformed_headers_are_rejected():
    for bad in (b"16abc", b"#x12", b"#3ab", b"#"):
        with pytest.raises(ProtocolError):
            parse_block_header(bad)


def test_header_parse_agrees_with_a_byte_by_byte_reading():
    """The header parse skips leading whitespace with ``lstrip``; it must give what a byte-by-byte
    reading gives (IEEE 488.2 8.7.9, from memory): the same lengths, the same refusals."""
    import random

    def walked(head: bytes) -> tuple[int, int | None] | str:
        start = 0
        while start < len(head) and head[start : start + 1] in (b" ", b"\t", b"\r", b"\n"):
            start += 1
        if start >= len(head) or head[start : start + 1] != b"#":
            return f"binary block must start with '#', got {bytes(head[start:start + 12])!r}"
        if start + 1 >= len(head):
            return "binary block header truncated after '#'"
        digit = head[start + 1 : start + 2]
        if not digit.isdigit():
            return f"binary block header: expected a digit after '#', got {digit!r}"
        n = int(digit)
        if n == 0:
            return start + 2, None
        digits = head[start + 2 : start + 2 + n]
        if len(digits) < n or not digits.isdigit():
            return "length"
        return start + 2 + n, int(digits)

    rng = random.Random(3)
    heads = [b"", b" ", b"#", b" \r\n#", b"\t#0", b"#41000", b"  #41000xyz", b"\x0b#12"]
    heads += [bytes(rng.choice(b" \t\r\n#0123x") for _ in range(rng.randrange(9))) for _ in range(4000)]
    for head in heads:
        for given in (head, bytearray(head)):
            expected = walked(given)
            if isinstance(expected, tuple):
                assert parse_block_header(given) == expected, head
            else:
                with pytest.raises(ProtocolError) as refused:
                    parse_block_header(given)
                assert expected in str(refused.value) or expected == "length", head


def test_declared_size_cap():
    with pytest.raises(ProtocolError, match="cap"):
        parse_block_header(b"#9999999999", max_bytes=1000)


def test_round_trip_float32():
    x = np.linspace(-1, 1, 7, dtype=np.float32)
    np.testing.assert_array_equal(parse_block(format_block(x, kind="float32"), kind="float32"), x)
