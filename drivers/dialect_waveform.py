"""The scope's ``waveform:`` section of a format-2 dialect: how a record is selected, calibrated
and fetched (the arithmetic itself is :mod:`drivers.scpi.waveform`)::

    waveform:
      select: "WAVeform:SOURce CHANnel{input}"          # optional, sent before the preamble
      preamble:                                        # one query, fields by 1-based position ...
        query: "WAVeform:PREamble?"
        fields: {points: 3, x_increment: 5, x_origin: 6, x_reference: 7,
                 y_increment: 8, y_origin: 9, y_reference: 10}
      # preamble: {queries: {x_increment: "WAVeform:XINCrement?", ...}}   # ... or one query each
      #   cache: true           # keep it between captures (default; drivers/roles/preamble_cache.py)
      #   affected_by: [set_range, set_offset, set_points, set_sample_rate, set_trigger_delay,
      #                 set_average_count]   # the writes that may change it (default: every write)
      data: {query: "WAVeform:DATA?", kind: uint8, byte_order: big}     # or encoding: ascii
      chunks: {max_points: 1000000, range: "WAVeform:STARt {start};:WAVeform:STOP {stop}"}

``range`` may use ``start``/``stop`` (1-based, inclusive) or ``offset``/``count`` (0-based).
"""

from __future__ import annotations

from collections.abc import Collection, Mapping
from dataclasses import dataclass

from drivers.dialect_ops import check_template, unknown_keys
from drivers.errors import Location, Problem
from drivers.scpi.templates import Template
from drivers.scpi.waveform import DATA_KINDS, PREAMBLE_NAMES, REQUIRED, DataFormat
from drivers.yamlsafe import YamlMap

KEYS = ("select", "preamble", "data", "chunks")
MAX_CHUNK_POINTS = 1 << 26


@dataclass(frozen=True, kw_only=True)
class WaveformSpec:
    """A checked ``waveform:`` section."""

    preamble_query: Template | None = None  # one query, fields by position ...
    positions: Mapping[str, int] | None = None
    separator: str = ","
    preamble_queries: Mapping[str, Template] | None = None  # ... or one query per value
    data_query: Template
    data: DataFormat
    select: Template | None = None
    max_points: int | None = None
    chunk_range: Template | None = None
    #: Keep the preamble between captures; None: every write may change it, else these operations.
    cache: bool = True
    affected_by: frozenset[str] | None = None
    location: Location


def read_waveform(
    section: object,
    where: Location,
    problems: list[Problem],
    operations: Collection[str] | None = None,
) -> WaveformSpec | None:
    """The section, or ``None`` with located problems added; ``operations``: the role's operation
    names, which ``preamble.affected_by`` may list."""
    if not isinstance(section, YamlMap):
        problems.append(
            Problem(where, "'waveform:' must be a mapping (select, preamble, data, chunks)")
        )
        return None
    before = len(problems)
    unknown_keys(section, KEYS, "waveform key", problems)
    names = {"input"}
    select = None
    if "select" in section:
        select = _template(section, "select", "waveform.select", names, problems)
    pre = _preamble(section, problems)
    data_query, data = _data(section, problems)
    max_points, chunk_range = _chunks(section, problems, pre)
    cache, affected_by = _caching(section.get("preamble"), operations, problems)
    if len(problems) > before or data_query is None or data is None or pre is None:
        return None
    query, positions, separator, queries = pre
    return WaveformSpec(preamble_query=query, positions=positions, separator=separator,
                        preamble_queries=queries, data_query=data_query, data=data, select=select,
                        max_points=max_points, chunk_range=chunk_range, cache=cache,
                        affected_by=affected_by, location=section.where())  # fmt: skip


def _template(
    entry: YamlMap, key: str, label: str, names: set[str], problems: list[Problem]
) -> Template | None:
    text = entry.get(key)
    if not isinstance(text, str) or not text.strip():
        problems.append(Problem(entry.where(key), f"{label} must be a command template"))
        return None
    return check_template(text, label, names, entry.where(key), problems)


def _preamble(section: YamlMap, problems: list[Problem]) -> tuple | None:
    entry = section.get("preamble")
    if not isinstance(entry, YamlMap):
        problems.append(Problem(section.where("preamble") if "preamble" in section else section.where(),
                                "waveform needs 'preamble:' with 'query:' and 'fields:', or "
                                "'queries:'"))  # fmt: skip
        return None
    unknown_keys(entry, ("query", "fields", "separator", "queries", "cache", "affected_by"),
                 "preamble key", problems)  # fmt: skip
    if "queries" in entry:
        queries = entry["queries"]
        if not isinstance(queries, YamlMap):
            problems.append(
                Problem(entry.where("queries"), "preamble queries map names to queries")
            )
            return None
        out = {}
        for name in queries:
            if name not in PREAMBLE_NAMES:
                problems.append(Problem(queries.where(name, of_key=True),
                                        f"unknown preamble value {name!r} (known: "
                                        f"{', '.join(PREAMBLE_NAMES)})"))  # fmt: skip
                continue
            t = _template(queries, name, f"preamble.{name}", {"input"}, problems)
            if t is not None:
                out[str(name)] = t
        _required(out, entry.where("queries"), problems)
        return None, None, ",", out
    query = _template(entry, "query", "waveform.preamble.query", {"input"}, problems)
    fields = entry.get("fields")
    if not isinstance(fields, YamlMap):
        problems.append(Problem(entry.where("fields") if "fields" in entry else entry.where(),
                                "preamble fields map names to 1-based positions, e.g. "
                                "{x_increment: 5, y_increment: 8}"))  # fmt: skip
        return None
    positions: dict[str, int] = {}
    for name, position in fields.items():
        if name not in PREAMBLE_NAMES:
            problems.append(Problem(fields.where(name, of_key=True),
                                    f"unknown preamble value {name!r} (known: "
                                    f"{', '.join(PREAMBLE_NAMES)})"))  # fmt: skip
        elif not isinstance(position, int) or isinstance(position, bool) or not 1 <= position <= 64:
            problems.append(Problem(fields.where(name), f"preamble {name}: a position 1..64"))
        else:
            positions[str(name)] = position
    _required(positions, entry.where("fields"), problems)
    separator = entry.get("separator", ",")
    if separator not in (",", ";"):
        problems.append(Problem(entry.where("separator"), "preamble separator must be ',' or ';'"))
    return query, positions, separator, None


def _caching(
    entry: object, operations: Collection[str] | None, problems: list[Problem]
) -> tuple[bool, frozenset[str] | None]:
    """``cache:`` (true or false) and ``affected_by:`` (a list of the role's write operations)."""
    if not isinstance(entry, YamlMap):
        return True, None
    cache = entry.get("cache", True)
    if not isinstance(cache, bool):
        problems.append(Problem(entry.where("cache"), "preamble cache must be true or false"))
        cache = True
    if "affected_by" not in entry:
        return cache, None
    names = entry["affected_by"]
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        problems.append(Problem(entry.where("affected_by"), "preamble affected_by lists the "
                                "operations that may change it, e.g. [set_range, set_points]"))  # fmt: skip
        return cache, None
    unknown = [n for n in names if operations is not None and n not in operations]
    if unknown:
        problems.append(Problem(entry.where("affected_by"), f"preamble affected_by: unknown "
                                f"operation {', '.join(unknown)} (known: "
                                f"{', '.join(sorted(operations or ()))})"))  # fmt: skip
    return cache, frozenset(names)


def _required(found: Mapping[str, object], where: Location, problems: list[Problem]) -> None:
    missing = [n for n in REQUIRED if n not in found]
    if missing:
        problems.append(Problem(where, f"the preamble must give {', '.join(missing)} (without "
                                       "it no code can be turned into volts)"))  # fmt: skip


def _data(section: YamlMap, problems: list[Problem]) -> tuple:
    entry = section.get("data")
    if not isinstance(entry, YamlMap):
        problems.append(Problem(section.where("data") if "data" in section else section.where(),
                                "waveform needs 'data:' with 'query:' and 'kind:' (or "
                                "'encoding: ascii')"))  # fmt: skip
        return None, None
    unknown_keys(entry, ("query", "kind", "byte_order", "encoding", "separator"), "data key",
                 problems)  # fmt: skip
    query = _template(entry, "query", "waveform.data.query", {"input"}, problems)
    encoding = entry.get("encoding", "binary")
    if encoding not in ("binary", "ascii"):
        problems.append(Problem(entry.where("encoding"), "encoding must be binary or ascii"))
    kind = entry.get("kind", "float64" if encoding == "ascii" else None)
    if kind not in DATA_KINDS:
        problems.append(Problem(entry.where("kind") if "kind" in entry else entry.where(),
                                f"data kind must be one of {', '.join(DATA_KINDS)}"))  # fmt: skip
        return query, None
    order = entry.get("byte_order", "big")
    if order not in ("big", "little"):
        problems.append(Problem(entry.where("byte_order"),
                                "byte_order must be 'big' (FORMat:BORDer NORMal) or 'little' "
                                "(SWAPped)"))  # fmt: skip
    separator = entry.get("separator", ",")
    if separator not in (",", ";"):
        problems.append(Problem(entry.where("separator"), "data separator must be ',' or ';'"))
        separator = ","
    fmt = DataFormat(kind=kind, big_endian=order != "little", ascii=encoding == "ascii",
                     separator=separator)  # fmt: skip
    return query, fmt


def _chunks(section: YamlMap, problems: list[Problem], pre: tuple | None) -> tuple:
    if "chunks" not in section:
        return None, None
    entry = section["chunks"]
    if not isinstance(entry, YamlMap):
        problems.append(
            Problem(section.where("chunks"), "chunks: {max_points: N, range: TEMPLATE}")
        )
        return None, None
    unknown_keys(entry, ("max_points", "range"), "chunks key", problems)
    n = entry.get("max_points")
    if not isinstance(n, int) or isinstance(n, bool) or not 1 <= n <= MAX_CHUNK_POINTS:
        problems.append(
            Problem(entry.where("max_points"), f"max_points must be 1..{MAX_CHUNK_POINTS}")
        )
        n = None
    names = {"input", "start", "stop", "offset", "count"}
    rng = _template(entry, "range", "waveform.chunks.range", names, problems)
    has_points = pre is not None and "points" in (pre[1] or pre[3] or {})
    if pre is not None and not has_points:
        problems.append(Problem(section.where("chunks"), "chunked fetch needs the preamble's "
                                                         "points (how long the record is)"))  # fmt: skip
    return n, rng
