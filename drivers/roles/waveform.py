"""Fetching one calibrated record as a format-2 dialect's ``waveform:`` section declares it.

Select the source (if the instrument needs it and another one was selected since), read the
preamble (one query with fields by position, or one query per value; unless the one kept still
holds, :mod:`drivers.roles.preamble_cache`), then the data -- in chunks of at most ``max_points`` when the
record is longer -- and calibrate with the references (:mod:`drivers.scpi.waveform`).  A record
whose length differs from the preamble's, or a preamble that would give wrong volts, is refused.
"""

from __future__ import annotations

import contextlib
from typing import Any

import numpy as np

from drivers.dialect_waveform import WaveformSpec
from drivers.errors import ConfigError, Problem, ProtocolError
from drivers.roles.preamble_cache import PreambleCache
from drivers.scpi.blocks import numpy_dtype
from drivers.scpi.replies import parse_number, split_fields
from drivers.scpi.session import ScpiSession
from drivers.scpi.templates import ExpressionError, Template
from drivers.scpi.waveform import (
    Preamble,
    calibrate,
    chunk_ranges,
    decode_codes,
    preamble_by_position,
    preamble_from,
)
from drivers.trace import Trace


def fetch_waveform(
    session: ScpiSession, spec: WaveformSpec, input: int, cache: PreambleCache | None = None
) -> Trace:
    """The last record of ``input`` in volts, with its time base; ``cache`` keeps the selection
    and the preamble between captures (:mod:`drivers.roles.preamble_cache`)."""
    source = f"CHAN{input}"
    with session.lock:
        try:
            pre, codes = _fetch(session, spec, input, cache)
        except BaseException:
            if cache is not None:
                cache.clear()
            raise
    try:
        volts = calibrate(codes, pre)
    except ValueError as exc:
        raise ProtocolError(f"{source}: {exc}", address=session.address) from None
    return Trace(volts=volts, dt_s=pre.x_increment, t0_s=pre.t0_s, source=source,
                 averages=pre.averages)  # fmt: skip


def _fetch(
    session: ScpiSession, spec: WaveformSpec, input: int, cache: PreambleCache | None
) -> tuple[Preamble, np.ndarray]:
    if spec.select is not None and not (cache is not None and cache.selected(input)):
        with cache.selecting(input) if cache is not None else contextlib.nullcontext():
            session.write(_fill(spec, spec.select, input=input), reapply=False)
    pre = cache.get(input) if cache is not None else None
    if pre is None:
        pre = read_preamble(session, spec, input)
        if cache is not None:
            cache.put(input, pre)
    codes = read_codes(session, spec, input, pre, cache)
    if pre.points is not None and len(codes) != pre.points:
        raise ProtocolError(
            f"CHAN{input}: preamble announces {pre.points} points, the record holds {len(codes)}",
            address=session.address,
        )
    return pre, codes


def read_preamble(session: ScpiSession, spec: WaveformSpec, input: int) -> Preamble:
    if spec.preamble_queries is not None:
        values = {
            name: session.query_parsed(_fill(spec, t, input=input), parse_number)
            for name, t in spec.preamble_queries.items()
        }
        try:
            return preamble_from(values)
        except ValueError as exc:
            raise ProtocolError(f"preamble: {exc}", address=session.address) from None
    assert spec.preamble_query is not None and spec.positions is not None
    positions, separator = spec.positions, spec.separator
    return session.query_parsed(
        _fill(spec, spec.preamble_query, input=input),
        lambda reply: preamble_by_position(split_fields(reply, separator), positions),
    )


def read_codes(
    session: ScpiSession,
    spec: WaveformSpec,
    input: int,
    pre: Preamble,
    cache: PreambleCache | None = None,
) -> np.ndarray:
    command = _fill(spec, spec.data_query, input=input)
    if spec.chunk_range is None or spec.max_points is None or pre.points is None:
        return _one(session, spec, command, pre.points)
    parts = []
    for first, count in chunk_ranges(pre.points, spec.max_points):
        fields = {"input": input, "start": first + 1, "stop": first + count, "offset": first,
                  "count": count}  # fmt: skip
        with cache.writing("chunks.range") if cache is not None else contextlib.nullcontext():
            session.write(_fill(spec, spec.chunk_range, **fields), reapply=False)
        part = _one(session, spec, command, count)
        if len(part) != count:
            raise ProtocolError(
                f"chunk at point {first + 1}: asked for {count} points, got {len(part)}",
                address=session.address,
                command=command,
            )
        parts.append(part)
    return np.concatenate(parts) if parts else np.zeros(0)


def _one(
    session: ScpiSession, spec: WaveformSpec, command: str, points: int | None = None
) -> np.ndarray:
    if spec.data.ascii:
        text = session.query(command)
        payload = _strip_block_header(text).encode("ascii")
    else:  # the block read is capped at the record the preamble announced (plus a margin)
        width = numpy_dtype(spec.data.kind, spec.data.big_endian).itemsize
        expected = int(points) * width if points is not None and points > 0 else None
        payload = session.query_block_bytes(command, expected_bytes=expected)
    try:
        return decode_codes(payload, spec.data)
    except (ValueError, UnicodeDecodeError) as exc:
        raise ProtocolError(f"waveform data: {exc}", address=session.address,
                            command=command) from None  # fmt: skip


def _strip_block_header(text: str) -> str:
    """ASCII data may come wrapped in a definite block header (``#800001234...``); drop it."""
    text = text.strip()
    if len(text) >= 2 and text[0] == "#" and text[1].isdigit():
        return text[2 + int(text[1]) :]
    return text


def _fill(spec: WaveformSpec, template: Template, **values: Any) -> str:
    try:
        return template.render(values)
    except ExpressionError as exc:
        raise ConfigError([Problem(spec.location, f"waveform: {exc}")]) from None
