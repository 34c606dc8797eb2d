"""IEEE 488.2 arbitrary block data (clause 7.7.6 / 8.7.9): pure encode and decode functions.

Definite length: ``#<n><len><data>`` where ``n`` (1-9) is the number of digits of ``len``.
Indefinite length: ``#0<data>`` terminated by the message terminator (newline + END).
Used by the drivers to decode traces and by the simulator to encode them.
"""

from __future__ import annotations

import functools

import numpy as np

from drivers.errors import ProtocolError

#: Largest block we accept (bytes): 512 MiB, well above a 100 M-sample int16 record.
MAX_BLOCK_BYTES = 512 * 1024 * 1024

_DTYPE_CODES = {"int8": "i1", "int16": "i2", "int32": "i4", "float32": "f4", "float64": "f8", "uint8": "u1", "uint16": "u2"}


@functools.lru_cache(maxsize=64)
def numpy_dtype(kind: str, big_endian: bool) -> np.dtype:
    """The numpy dtype for an element kind (``int16``, ``float32``...) and byte order.

    SCPI's default byte order (``FORMat:BORDer NORMal``) is big-endian; ``SWAPped`` is little-endian.
    Kept per (kind, order): a pure function asked twice per fetch (0.5 us made, 0.1 us kept); an
    unknown kind raises and is not kept.
    """
    try:
        code = _DTYPE_CODES[kind]
    except KeyError:
        raise ValueError(f"unknown element kind {kind!r}; expected one of {sorted(_DTYPE_CODES)}") from None
    if code.endswith("1"):
        return np.dtype(code)
    return np.dtype((">" if big_endian else "<") + code)


def format_block(data: np.ndarray | bytes, *, kind: str = "int16", big_endian: bool = True) -> bytes:
    """Encode ``data`` as a definite-length block ``#<n><len><bytes>`` (no terminator)."""
    if isinstance(data, bytes | bytearray | memoryview):
        payload = bytes(data)
    else:
        payload = np.ascontiguousarray(data, dtype=numpy_dtype(kind, big_endian)).tobytes()
    length = str(len(payload))
    if len(length) > 9:
        raise ValueError("block too long for a definite-length header")
    return b"#" + str(len(length)).encode() + length.encode() + payload


def parse_block_header(head: bytes, *, max_bytes: int = MAX_BLOCK_BYTES) -> tuple[int, int | None]:
    """Parse the start of a block.

    Returns ``(header_length, data_length)``; ``data_length`` is ``None`` for an indefinite ``#0``
    block.  ``head`` must hold at least the whole header (at most 11 bytes) or a ``ProtocolError`` names
    what is missing.  Leading whitespace before ``#`` is skipped and counted in ``header_length``.
    """
    start = len(head) - len(head.lstrip(b" \t\r\n"))  # leading whitespace skipped
    if head[start : start + 1] != b"#":
        raise ProtocolError(f"binary block must start with '#', got {bytes(head[start:start + 12])!r}")
    digit = head[start + 1 : start + 2]
    if not digit:
        raise ProtocolError("binary block header truncated after '#'")
    if not digit.isdigit():
        raise ProtocolError(f"binary block header: expected a digit after '#', got {digit!r}")
    n = int(digit)
    if n == 0:
        return start + 2, None
    digits = head[start + 2 : start + 2 + n]
    if len(digits) < n:
        raise ProtocolError(f"binary block header truncated: expected {n} length digits, got {digits!r}")
    if not digits.isdigit():
        raise ProtocolError(f"binary block header: length {digits!r} is not a number")
    length = int(digits)
    if length > max_bytes:
        raise ProtocolError(f"binary block declares {length} bytes, above the cap of {max_bytes}")
    return start + 2 + n, length


def parse_block(
    message: bytes, *, kind: str = "int16", big_endian: bool = True, max_bytes: int = MAX_BLOCK_BYTES
) -> np.ndarray:
    """Decode a whole block message (header, data and optional terminator) into a numpy array.

    For a ``#0`` block the data runs to the end of the message minus one trailing ``\\n``.
    The array is returned in native byte order.
    """
    header_len, length = parse_block_header(message[:16], max_bytes=max_bytes)
    body = message[header_len:]
    if length is None:
        if body.endswith(b"\r\n"):
            body = body[:-2]
        elif body.endswith(b"\n"):
            body = body[:-1]
    else:
        if len(body) < length:
            raise ProtocolError(f"binary block truncated: header declares {length} bytes, got {len(body)}")
        rest = body[length:]
        if rest.strip(b"\r\n"):
            raise ProtocolError(f"unexpected {len(rest)} bytes after binary block")
        body = body[:length]
    return decode_payload(body, kind=kind, big_endian=big_endian)


def decode_payload(payload: bytes | memoryview, *, kind: str = "int16", big_endian: bool = True) -> np.ndarray:
    """Decode raw block bytes into a native-order numpy array."""
    dtype = numpy_dtype(kind, big_endian)
    if len(payload) % dtype.itemsize:
        raise ProtocolError(
            f"binary block of {len(payload)} bytes is not a whole number of {kind} elements"
        )
    return np.frombuffer(payload, dtype=dtype).astype(dtype.newbyteorder("="), copy=True)
